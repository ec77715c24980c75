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
// by side under a header that names the scene, the bands of the composite,
// the PSF and the method, and prints the stretch. Observed and restored share
// one linear stretch per channel (qlScene.stretch: 2-98 percentiles of both
// crops' valid pixels once outlier clusters are set aside), so brightness and
// contrast compare directly; the error map (another unit, DN of standard
// error: the grid method's noise error, the particle method's total error)
// has its own 0 to 98th percentile grey stretch with a labelled grey
// bar. Each panel carries a scale bar in map units from the geotransform.

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
	// info names the scene, PSF and method for the header; bandNames
	// labels each display channel ("band 3 (red)").
	info      qlInfo
	bandNames []string
}

// qlInfo is what the quicklook's title line names.
type qlInfo struct {
	Scene, PSF, Method string
	// Error titles the error panel (errorTitle).
	Error string
}

// errorTitle names the --uncertainty map of a method by what it holds: the
// grid method's data-noise error, or the particle method's total of its
// data-noise and Monte Carlo parts (step/uncertainty.go).
func errorTitle(method string) string {
	if method == "particle" {
		return "total error: noise + Monte Carlo (DN)"
	}
	return "noise error (DN)"
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

// Quicklook layout: pixels between panels, the height of one text line
// (basicfont's 7 x 13 face and 2 px of leading), the width of one character
// and the height of the error panel's grey bar row (10 px bar, ticks and
// labels).
const qlGap, qlLine, qlChar, qlBar = 8, 15, 7, 30

// qlOutlierSigmas: values farther than this many robust standard deviations
// (1.4826 x the median absolute deviation) from a channel's median are set
// aside before the stretch's percentiles are taken. The rule is Hampel's
// outlier identifier (Hampel, JASA 69(346):383-393, 1974; the 1.4826 factor
// makes the MAD estimate a normal sigma: Rousseeuw & Croux, JASA
// 88(424):1273-1283, 1993; both references from memory), with a wide cut
// of 10 rather than the usual 3 because a scene's histogram is a mix of
// land-cover classes, not one normal population: the cut must keep bright
// fields (the demo's bare-soil parcels, 7 % of its centre crop at about
// 6-8 robust sigma above the median in red) and remove only compact
// clusters far from the scene's bulk (calibration tarps, clouds, saturated
// targets: the fixture's tarp at about 25 robust sigma), whose share above
// 2 % would otherwise pull the 98th percentile onto them and leave the rest
// of the scene near black. Chosen on those two scenes; common practice has
// no fixed value.
const qlOutlierSigmas = 10

// render draws the quicklook: a header (title, composite bands, stretch;
// panel titles; the error panel's grey bar) above the panels.
func (s *qlScene) render() *image.RGBA {
	panels := 2
	if s.unc != nil {
		panels = 3
	}
	W := panels*s.cw + (panels-1)*qlGap
	lo, hi, out := s.stretch()
	top := 0.0
	if s.unc != nil {
		top = s.uncertaintyTop()
	}
	var lines []string
	for _, par := range s.header(lo, hi, out) {
		lines = append(lines, wrapText(par, max(8, (W-4)/qlChar))...)
	}
	head := qlLine*(len(lines)+1) + 2
	if s.unc != nil {
		head += qlBar
	}
	img := image.NewRGBA(image.Rect(0, 0, W, s.ch+head))
	draw.Draw(img, img.Bounds(), image.NewUniform(color.RGBA{255, 255, 255, 255}), image.Point{}, draw.Src)
	for i, l := range lines {
		drawText(img, 2, qlLine*i+12, l, color.Black)
	}
	titles := []string{"observed", "restored", s.info.Error}
	for k, t := range titles[:panels] {
		drawText(img, k*(s.cw+qlGap)+2, qlLine*len(lines)+13, t, color.RGBA{0, 0, 120, 255})
	}
	s.drawColour(img, lo, hi, head)
	if s.unc != nil {
		s.drawUncertainty(img, top, head)
		drawGreyBar(img, 2*(s.cw+qlGap), qlLine*(len(lines)+1)+4, s.cw, top)
	}
	s.drawScaleBars(img, panels, head)
	return img
}

// header returns the header's paragraphs: the scene, PSF and method; the
// bands that make the picture; the stretch in DN.
func (s *qlScene) header(lo, hi, out []float64) []string {
	var first []string
	for _, v := range []string{s.info.Scene, s.info.PSF, s.info.Method} {
		if v != "" {
			first = append(first, v)
		}
	}
	names := s.bandNames
	for len(names) < len(s.obs) {
		names = append(names, fmt.Sprintf("channel %d", len(names)+1))
	}
	ch := []string{"grey"}
	comp := "grey = " + names[0]
	if len(s.obs) == 3 {
		ch = []string{"R", "G", "B"}
		comp = fmt.Sprintf("colour composite R, G, B = %s, %s, %s", names[0], names[1], names[2])
	}
	var st []string
	maxOut := 0.0
	for c := range lo {
		st = append(st, fmt.Sprintf("%s\u00a0%.4g-%.4g", ch[c], lo[c], hi[c]))
		maxOut = math.Max(maxOut, out[c])
	}
	stretch := "linear stretch (DN), shared by observed and restored: " + strings.Join(st, ", ") + " (2-98\u00a0% of the valid pixels"
	if maxOut > 0 {
		stretch += fmt.Sprintf("; up to %.1f\u00a0%% outliers beyond median +- %d robust sigma set aside", 100*maxOut, qlOutlierSigmas)
	}
	stretch += ")"
	var pars []string
	if len(first) > 0 {
		pars = append(pars, strings.Join(first, " | "))
	}
	return append(pars, comp, stretch)
}

// wrapText breaks text at spaces into lines of at most n characters (a
// longer word stays whole on its own line); a no-break space (U+00A0) joins
// words and is drawn as a space.
func wrapText(text string, n int) []string {
	var lines []string
	cur := ""
	// strings.Fields would split at U+00A0 too (unicode.IsSpace).
	ascii := func(r rune) bool { return r == ' ' || r == '\n' || r == '\t' }
	for _, w := range strings.FieldsFunc(text, ascii) {
		w = strings.ReplaceAll(w, "\u00a0", " ")
		switch {
		case cur == "":
			cur = w
		case len(cur)+1+len(w) <= n:
			cur += " " + w
		default:
			lines = append(lines, cur)
			cur = w
		}
	}
	if cur != "" {
		lines = append(lines, cur)
	}
	return lines
}

// drawText writes str with its baseline at y in basicfont's 7 x 13 face.
func drawText(img *image.RGBA, x, y int, str string, col color.Color) {
	d := font.Drawer{Dst: img, Src: image.NewUniform(col), Face: basicfont.Face7x13, Dot: fixed.P(x, y)}
	d.DrawString(str)
}

// stretch returns each display channel's stretch over the valid pixels of
// both crops: the 2 and 98 percentiles (common practice for a linear
// quicklook stretch, no source) of the values within qlOutlierSigmas robust
// standard deviations of the median, and the fraction of values set aside
// ([0, 1] when the percentiles do not differ).
func (s *qlScene) stretch() (lo, hi, out []float64) {
	nc := len(s.obs)
	lo, hi, out = make([]float64, nc), make([]float64, nc), make([]float64, nc)
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
		in := inliers(vals)
		lo[c], hi[c] = percentile(in, 0.02), percentile(in, 0.98)
		if len(vals) > 0 {
			out[c] = 1 - float64(len(in))/float64(len(vals))
		}
		if !(hi[c] > lo[c]) {
			lo[c], hi[c] = 0, 1
		}
	}
	return lo, hi, out
}

// inliers returns the run of sorted values within qlOutlierSigmas robust
// standard deviations (1.4826 MAD) of their median (all of them when the MAD
// is 0).
func inliers(sorted []float64) []float64 {
	if len(sorted) == 0 {
		return sorted
	}
	med := percentile(sorted, 0.5)
	dev := make([]float64, len(sorted))
	for i, v := range sorted {
		dev[i] = math.Abs(v - med)
	}
	sort.Float64s(dev)
	sig := 1.4826 * percentile(dev, 0.5)
	if !(sig > 0) {
		return sorted
	}
	i0 := sort.SearchFloat64s(sorted, med-qlOutlierSigmas*sig)
	i1 := sort.Search(len(sorted), func(i int) bool { return sorted[i] > med+qlOutlierSigmas*sig })
	return sorted[i0:i1]
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
// stretch below the header; a grey scene repeats its one channel.
func (s *qlScene) drawColour(img *image.RGBA, lo, hi []float64, head int) {
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
				img.SetRGBA(k*(s.cw+qlGap)+x, head+y, color.RGBA{px[0], px[1], px[2], 255})
			}
		}
	}
}

// uncertaintyTop is the error panel's white level: the 98th percentile of
// the standard error over the valid pixels (1 when that is not positive).
func (s *qlScene) uncertaintyTop() float64 {
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
	return top
}

// drawUncertainty draws the third panel, the standard error in grey from 0
// to top.
func (s *qlScene) drawUncertainty(img *image.RGBA, top float64, head int) {
	for y := 0; y < s.ch; y++ {
		for x := 0; x < s.cw; x++ {
			i := y*s.cw + x
			g := uint8(0)
			if s.valid[i] {
				g = to8(float64(s.unc[i]), 0, top)
			}
			img.SetRGBA(2*(s.cw+qlGap)+x, head+y, color.RGBA{g, g, g, 255})
		}
	}
}

// drawGreyBar draws the error panel's key at (x0, y0), w pixels wide: a
// black-to-white ramp from 0 to top DN in a thin frame, with ticks and
// labels at 0, top/2 and top.
func drawGreyBar(img *image.RGBA, x0, y0, w int, top float64) {
	const h = 10
	bx0, bx1 := x0+4, x0+w-4
	fillRect(img, bx0-1, y0-1, bx1+1, y0+h+1, color.RGBA{0, 0, 0, 255})
	for x := bx0; x < bx1; x++ {
		g := to8(float64(x-bx0), 0, float64(bx1-bx0-1))
		fillRect(img, x, y0, x+1, y0+h, color.RGBA{g, g, g, 255})
	}
	for k, v := range []float64{0, top / 2, top} {
		x := bx0 + int(math.Round(float64(k)/2*float64(bx1-bx0-1)))
		fillRect(img, x, y0+h+1, x+1, y0+h+4, color.RGBA{0, 0, 0, 255})
		label := fmt.Sprintf("%.3g", v)
		if k == 2 {
			label += " DN"
		}
		lw := font.MeasureString(basicfont.Face7x13, label).Ceil()
		lx := min(max(x-lw/2, x0+1), x0+w-lw-2)
		drawText(img, lx, y0+h+15, label, color.Black)
	}
}

// drawScaleBars draws on each panel, when it fits, a scale bar of about a
// quarter of the panel width with its length in map units.
func (s *qlScene) drawScaleBars(img *image.RGBA, panels, head int) {
	length := niceLength(float64(s.cw) / 4 * s.pixel)
	barPx := int(math.Round(length / s.pixel))
	label := fmt.Sprintf("%g %s", length, s.unit)
	if s.unit == "m" && length >= 1000 {
		label = fmt.Sprintf("%g km", length/1000)
	}
	if barPx < 2 || barPx > s.cw-8 {
		return
	}
	for k := 0; k < panels; k++ {
		bx, by := k*(s.cw+qlGap)+6, head+s.ch-8
		fillRect(img, bx-1, by-1, bx+barPx+1, by+5, color.RGBA{0, 0, 0, 255})
		fillRect(img, bx, by, bx+barPx, by+4, color.RGBA{255, 255, 255, 255})
		// Label on a dark box above the bar.
		lw := font.MeasureString(basicfont.Face7x13, label).Ceil()
		fillRect(img, bx-1, by-15, bx+lw+2, by-2, color.RGBA{0, 0, 0, 255})
		drawText(img, bx, by-5, label, color.White)
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
// obsBands are the 0-based observed bands that became the output's bands;
// info names the scene, PSF and method in the header.
func cropScene(obsPath string, obsBands []int, resPath, uncPath string, info qlInfo) (*qlScene, error) {
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
	s := &qlScene{cw: cw, ch: ch, info: info}
	for _, b := range ob {
		s.bandNames = append(s.bandNames, bandLabel(b+1, mo.Bands[b]))
	}
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

// bandLabel names band n (1-based) for a reader: "band 3 (red)" from its
// description, else its colour interpretation, else "band 3".
func bandLabel(n int, b raster.BandInfo) string {
	name := bandName(b)
	if name == "" {
		return fmt.Sprintf("band %d", n)
	}
	return fmt.Sprintf("band %d (%s)", n, name)
}

// bandName is a band's description, else its colour interpretation in
// lower case, else "".
func bandName(b raster.BandInfo) string {
	name := strings.TrimSpace(b.Description)
	if name == "" && b.ColorInterp != "" && !strings.EqualFold(b.ColorInterp, "Undefined") {
		name = strings.ToLower(b.ColorInterp)
	}
	return name
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
