package main

import (
	"bytes"
	"fmt"
	"image"
	"image/color"
	"image/draw"
	"image/png"
	"math"
	"sort"
	"strings"

	"golang.org/x/image/font"
	"golang.org/x/image/font/basicfont"
	"golang.org/x/image/math/fixed"

	"limpid/raster"
	"limpid/raster/gdal"
)

// Quicklooks: observed | restored (| uncertainty) crops of the same area side
// by side. Observed and restored share one 2-98 percentile stretch per
// channel (computed over both crops' valid pixels), so brightness and
// contrast compare directly; the uncertainty (another unit, DN of standard
// error) has its own 0 to 98th percentile grey stretch. Each panel carries a
// scale bar in map units from the geotransform.

// qlCropSide is the largest panel side in pixels (the crop is at most
// qlCropSide x qlCropSide).
const qlCropSide = 320

// qlScene is what a quicklook shows: channel planes of a cw x ch crop.
type qlScene struct {
	cw, ch int
	// obs, res: one plane per display channel (1: grey, 3: red, green, blue).
	obs, res [][]float32
	// unc: optional standard-error plane (first channel only).
	unc   []float32
	valid []bool
	// pixel is the ground size of one pixel in map units, unit its name
	// ("px" without a geotransform).
	pixel float64
	unit  string
}

// displayBands picks the bands shown: red, green, blue by colour
// interpretation when present, else bands 3, 2, 1 of a scene with at least
// three bands, else band 1 alone. It returns indices into bands.
func displayBands(bands []raster.BandInfo) []int {
	find := func(name string) int {
		for i, b := range bands {
			if strings.EqualFold(b.ColorInterp, name) {
				return i
			}
		}
		return -1
	}
	if r, g, b := find("Red"), find("Green"), find("Blue"); r >= 0 && g >= 0 && b >= 0 {
		return []int{r, g, b}
	}
	if len(bands) >= 3 {
		return []int{2, 1, 0}
	}
	return []int{0}
}

// mapScale returns the pixel's ground size and the unit name.
func mapScale(g raster.Geo) (float64, string) {
	if !g.HasTransform {
		return 1, "px"
	}
	px := math.Hypot(g.Transform[1], g.Transform[4])
	w := strings.ToUpper(g.WKT)
	switch {
	case strings.HasPrefix(w, "PROJCS") || strings.HasPrefix(w, "PROJCRS"):
		if strings.Contains(w, "FOOT") {
			return px, "ft"
		}
		return px, "m"
	case w == "":
		return px, "units"
	}
	return px, "deg"
}

// niceLength is the largest 1, 2 or 5 x 10^k not above x.
func niceLength(x float64) float64 {
	if !(x > 0) {
		return 0
	}
	p := math.Pow(10, math.Floor(math.Log10(x)))
	for _, m := range []float64{5, 2, 1} {
		if m*p <= x {
			return m * p
		}
	}
	return p
}

func percentile(v []float64, q float64) float64 {
	if len(v) == 0 {
		return math.NaN()
	}
	return v[min(len(v)-1, int(q*float64(len(v))))]
}

// Quicklook layout: pixels between panels and the title strip's height.
const qlGap, qlHead = 8, 18

// render draws the quicklook.
func (s *qlScene) render() *image.RGBA {
	panels := 2
	if s.unc != nil {
		panels = 3
	}
	img := image.NewRGBA(image.Rect(0, 0, panels*s.cw+(panels-1)*qlGap, s.ch+qlHead))
	draw.Draw(img, img.Bounds(), image.NewUniform(color.RGBA{255, 255, 255, 255}), image.Point{}, draw.Src)
	lo, hi := s.stretch()
	s.drawColour(img, lo, hi)
	titles := []string{"observed", "restored", "Monte Carlo std. error"}
	if s.unc != nil {
		top := s.drawUncertainty(img)
		titles[2] = fmt.Sprintf("Monte Carlo std. error (0-%.3g DN)", top)
	}
	s.drawLabels(img, titles[:panels])
	return img
}

// stretch returns each display channel's 2 and 98 percentiles over the
// valid pixels of both crops ([0, 1] when they do not differ).
func (s *qlScene) stretch() (lo, hi []float64) {
	nc := len(s.obs)
	lo, hi = make([]float64, nc), make([]float64, nc)
	for c := 0; c < nc; c++ {
		var vals []float64
		for _, p := range [][]float32{s.obs[c], s.res[c]} {
			for i, v := range p {
				if s.valid[i] && !math.IsNaN(float64(v)) {
					vals = append(vals, float64(v))
				}
			}
		}
		sort.Float64s(vals)
		lo[c], hi[c] = percentile(vals, 0.02), percentile(vals, 0.98)
		if !(hi[c] > lo[c]) {
			lo[c], hi[c] = 0, 1
		}
	}
	return lo, hi
}

// to8 maps v from [a, b] to 0-255, clamped (NaN: 0).
func to8(v, a, b float64) uint8 {
	t := (v - a) / (b - a)
	if math.IsNaN(t) {
		return 0
	}
	return uint8(math.Round(255 * math.Min(1, math.Max(0, t))))
}

// drawColour draws the observed and restored panels with the shared
// stretch; a grey scene repeats its one channel.
func (s *qlScene) drawColour(img *image.RGBA, lo, hi []float64) {
	nc := len(s.obs)
	for k, planes := range [][][]float32{s.obs, s.res} {
		for y := 0; y < s.ch; y++ {
			for x := 0; x < s.cw; x++ {
				i := y*s.cw + x
				var px [3]uint8
				for c := 0; c < 3; c++ {
					cc := min(c, nc-1)
					if s.valid[i] {
						px[c] = to8(float64(planes[cc][i]), lo[cc], hi[cc])
					}
				}
				img.SetRGBA(k*(s.cw+qlGap)+x, qlHead+y, color.RGBA{px[0], px[1], px[2], 255})
			}
		}
	}
}

// drawUncertainty draws the third panel, the standard error in grey from 0
// to its 98th percentile over the valid pixels, and returns that top.
func (s *qlScene) drawUncertainty(img *image.RGBA) float64 {
	var vals []float64
	for i, v := range s.unc {
		if s.valid[i] && !math.IsNaN(float64(v)) {
			vals = append(vals, float64(v))
		}
	}
	sort.Float64s(vals)
	top := percentile(vals, 0.98)
	if !(top > 0) {
		top = 1
	}
	for y := 0; y < s.ch; y++ {
		for x := 0; x < s.cw; x++ {
			i := y*s.cw + x
			g := uint8(0)
			if s.valid[i] {
				g = to8(float64(s.unc[i]), 0, top)
			}
			img.SetRGBA(2*(s.cw+qlGap)+x, qlHead+y, color.RGBA{g, g, g, 255})
		}
	}
	return top
}

// drawLabels writes each panel's title and, when it fits, a scale bar of
// about a quarter of the panel width with its length in map units.
func (s *qlScene) drawLabels(img *image.RGBA, titles []string) {
	face := basicfont.Face7x13
	text := func(x, y int, str string, col color.Color) {
		d := font.Drawer{Dst: img, Src: image.NewUniform(col), Face: face, Dot: fixed.P(x, y)}
		d.DrawString(str)
	}
	length := niceLength(float64(s.cw) / 4 * s.pixel)
	barPx := int(math.Round(length / s.pixel))
	label := fmt.Sprintf("%g %s", length, s.unit)
	if s.unit == "m" && length >= 1000 {
		label = fmt.Sprintf("%g km", length/1000)
	}
	for k, title := range titles {
		x0 := k * (s.cw + qlGap)
		text(x0+2, 13, title, color.Black)
		if barPx < 2 || barPx > s.cw-8 {
			continue
		}
		bx, by := x0+6, qlHead+s.ch-8
		fillRect(img, bx-1, by-1, bx+barPx+1, by+5, color.RGBA{0, 0, 0, 255})
		fillRect(img, bx, by, bx+barPx, by+4, color.RGBA{255, 255, 255, 255})
		// Label on a dark box above the bar.
		lw := font.MeasureString(face, label).Ceil()
		fillRect(img, bx-1, by-15, bx+lw+2, by-2, color.RGBA{0, 0, 0, 255})
		text(bx, by-5, label, color.White)
	}
}

// fillRect sets the pixels of [x0, x1) x [y0, y1) to c.
func fillRect(img *image.RGBA, x0, y0, x1, y1 int, c color.RGBA) {
	for y := y0; y < y1; y++ {
		for x := x0; x < x1; x++ {
			img.SetRGBA(x, y, c)
		}
	}
}

// encodePNG returns the PNG bytes of img.
func encodePNG(img image.Image) ([]byte, error) {
	var b bytes.Buffer
	if err := png.Encode(&b, img); err != nil {
		return nil, err
	}
	return b.Bytes(), nil
}

// cropScene reads the centre crop (at most qlCropSide x qlCropSide) of the
// observed and restored rasters (and the uncertainty when uncPath is not "");
// obsBands are the 0-based observed bands that became the output's bands.
func cropScene(obsPath string, obsBands []int, resPath, uncPath string) (*qlScene, error) {
	ro, err := gdal.Open(obsPath)
	if err != nil {
		return nil, err
	}
	defer ro.Close()
	rr, err := gdal.Open(resPath)
	if err != nil {
		return nil, err
	}
	defer rr.Close()
	mr := rr.Meta()
	mo := ro.Meta()
	W, H := mr.Width, mr.Height
	cw, ch := min(W, qlCropSide), min(H, qlCropSide)
	x0, y0 := (W-cw)/2, (H-ch)/2
	disp := displayBands(mr.Bands)
	read := func(r *gdal.Reader, bands []int) ([][]float32, error) {
		return readBandsWindow(r, bands, x0, y0, cw, ch)
	}
	ob := make([]int, len(disp))
	for i, d := range disp {
		ob[i] = obsBands[d]
	}
	s := &qlScene{cw: cw, ch: ch}
	if s.obs, err = read(ro, ob); err != nil {
		return nil, err
	}
	if s.res, err = read(rr, disp); err != nil {
		return nil, err
	}
	s.valid = make([]bool, cw*ch)
	for i := range s.valid {
		ok := true
		for c := range disp {
			bo, br := mo.Bands[ob[c]], mr.Bands[disp[c]]
			ok = ok && raster.Valid(s.obs[c][i], bo.NoData, bo.HasNoData, 0, false) && raster.Valid(s.res[c][i], br.NoData, br.HasNoData, 0, false)
		}
		s.valid[i] = ok
	}
	if uncPath != "" {
		ru, err := gdal.Open(uncPath)
		if err != nil {
			return nil, err
		}
		defer ru.Close()
		u, err := read(ru, disp[:1])
		if err != nil {
			return nil, err
		}
		s.unc = u[0]
	}
	s.pixel, s.unit = mapScale(mr.Geo)
	return s, nil
}

// readBandsWindow reads the cw x ch window at (x0, y0) of the given 0-based bands.
func readBandsWindow(r *gdal.Reader, bands []int, x0, y0, cw, ch int) ([][]float32, error) {
	W := r.Meta().Width
	dst := make([][]float32, len(bands))
	for i := range dst {
		dst[i] = make([]float32, W*ch)
	}
	if err := r.ReadRows(y0, y0+ch, bands, dst); err != nil {
		return nil, err
	}
	out := make([][]float32, len(bands))
	for i := range dst {
		out[i] = make([]float32, cw*ch)
		for y := 0; y < ch; y++ {
			copy(out[i][y*cw:(y+1)*cw], dst[i][y*W+x0:y*W+x0+cw])
		}
	}
	return out, nil
}
