package main

import (
	"bytes"
	"encoding/base64"
	"fmt"
	"html/template"
	"image/color"
	"math"
	"strconv"
	"strings"
	"time"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/plotutil"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
	"gonum.org/v1/plot/vg/vgimg"

	"limpid/psf"
	"limpid/raster"
	"limpid/raster/gdal"
	"limpid/step"
	"limpid/step/assess"
)

// restore --report-html: one self-contained page (images inline as base64
// PNG data URLs, no script, no network) describing a finished restoration.

// reportMetricSide bounds the centre window (pixels a side) on which the
// page's per-band metrics are measured (whole-band flux comes from the run).
const reportMetricSide = 1024

type htmlBand struct {
	Band, Source                      int
	Name                              string
	Noise, Choice                     string
	NoiseObs, NoiseRes                string
	MTF50Obs, MTF50Res, Gain, Edges   string
	RingObs, RingRes, Flux            string
	Iterations                        string
	ValidPixels                       int64
	Background                        float64
	FluxBefore, FluxAfter, FluxChange string
}

type htmlPage struct {
	Title                        string
	Rows                         [][2]string
	PSFPlot, Quicklook, ConvPlot template.URL
	Bands                        []htmlBand
	MetricWindow                 string
	Caution                      string
	Finished                     string
	HasUncertainty               bool
	UncertaintyTitle             string // errorTitle: what the error map holds
	// ConvCaption describes the convergence figure as drawn.
	ConvCaption string
	// PSFNote and ConvNote replace a figure that could not be drawn.
	PSFNote, ConvNote string
}

var pageTmpl = template.Must(template.New("page").Parse(`<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8"><title>{{.Title}}</title>
<style>
body{font-family:sans-serif;max-width:1100px;margin:1em auto;color:#222}
table{border-collapse:collapse;margin:0.5em 0;font-size:90%}td,th{border:1px solid #bbb;padding:2px 6px;text-align:right}
th{background:#eee}td.l{text-align:left}img{max-width:100%;border:1px solid #ccc}
.caution{border:2px solid #a33;padding:0.6em;background:#fff4f4}
</style></head><body>
<h1>{{.Title}}</h1>
<p class="caution">{{.Caution}}</p>
<h2>Job</h2>
<table>{{range .Rows}}<tr><th>{{index . 0}}</th><td class="l">{{index . 1}}</td></tr>{{end}}</table>
<h2>PSF and its MTF</h2>
{{if .PSFPlot}}<img id="psf" alt="PSF profiles and MTF" src="{{.PSFPlot}}">
<p id="psf-caption">Left: the kernel's weights through its centre. Right: MTF against frequency in cycles/pixel: the kernel
(the sampled PSF the restoration inverts, up to Nyquist), the model (the continuous transfer function the PSF
specification names, when it names one; not for kernel: or measured:) and the system, model (else kernel) times the pixel aperture |sinc f| (what a slanted-edge
measurement such as <code>limpid psf measure</code> sees); the dotted grey line marks Nyquist, 0.5 cycles/pixel. Curves that
coincide are drawn with distinct widths and dashes and named so in the legend.</p>{{else}}<p class="note" id="psf-note">{{.PSFNote}}</p>{{end}}
<h2>Observed | restored{{if .HasUncertainty}} | {{.UncertaintyTitle}}{{end}}</h2>
<p>Centre crop; the header names the bands of the composite and prints the stretch in DN. Observed and restored share one
linear 2-98 % stretch per channel, taken after values beyond 10 robust standard deviations of the median (bright tarps,
clouds, saturated targets) are set aside;{{if .HasUncertainty}} the error map ({{.UncertaintyTitle}}: a standard deviation in DN; PSF and noise-model errors are not in it) has its own 0-98 % grey scale, keyed by the bar above it;{{end}}
scale bar in map units.</p>
<img id="quicklook" alt="quicklook" src="{{.Quicklook}}">
<h2>Per-band metrics</h2>
<p>Noise, MTF50 (ISO 12233 slanted edges found in the observation, same windows in both),
ringing (overshoot beyond the edge plateaus / step) measured on {{.MetricWindow}};
flux over the whole band from the run. Definitions: README, "limpid assess".</p>
<table><tr><th>band</th><th>input band</th><th>noise model: variance (DN&sup2;), signal in DN</th><th>choice</th><th>tile iterations (min-max)</th>
<th>noise obs (DN)</th><th>noise res (DN)</th><th>MTF50 obs (cycles/pixel)</th><th>MTF50 res (cycles/pixel)</th><th>sharpness gain (ratio)</th><th>edges (count)</th>
<th>ringing obs (% of step)</th><th>ringing res (% of step)</th><th>flux change (%)</th><th>valid pixels (count)</th></tr>
{{range .Bands}}<tr><td class="l">{{.Name}}</td><td>{{.Source}}</td><td class="l">{{.Noise}}</td><td class="l">{{.Choice}}</td><td>{{.Iterations}}</td>
<td>{{.NoiseObs}}</td><td>{{.NoiseRes}}</td><td>{{.MTF50Obs}}</td><td>{{.MTF50Res}}</td><td>{{.Gain}}</td><td>{{.Edges}}</td>
<td>{{.RingObs}}</td><td>{{.RingRes}}</td><td>{{.FluxChange}}</td><td>{{.ValidPixels}}</td></tr>
{{end}}</table>
<h2>Convergence</h2>
{{if .ConvPlot}}<img id="convergence" alt="convergence" src="{{.ConvPlot}}">{{else}}<p class="note" id="convergence-note">{{.ConvNote}}</p>{{end}}
{{if .ConvCaption}}<p id="convergence-caption">{{.ConvCaption}}</p>{{end}}
<p>Written {{.Finished}} by limpid.</p>
</body></html>
`))

func dataURL(png []byte) template.URL {
	return template.URL("data:image/png;base64," + base64.StdEncoding.EncodeToString(png))
}

func fmtOr(v float64, format string) string {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return "-"
	}
	return fmt.Sprintf(format, v)
}

// htmlReport builds the page. A figure that cannot be drawn is left out
// with a note on the page; warnings says which (the product stays).
func htmlReport(j *restoreJob, inPath string, bands []int, rep *step.Report, quicklookPNG []byte) (page []byte, warnings []string, err error) {
	metrics, infos, window, err := cropMetrics(inPath, bands, j.out)
	if err != nil {
		return nil, nil, err
	}
	// Band names for the table and the plots: the input band's description
	// or colour interpretation ("red"), else "band 3" (output numbering).
	names := make([]string, len(rep.Bands))
	for i, b := range rep.Bands {
		names[i] = fmt.Sprintf("band %d", b.Band)
		if i < len(infos) && bandName(infos[i]) != "" {
			names[i] = bandName(infos[i])
		}
	}
	// The caution constant is wrapped for terminals; the page reflows it.
	p := htmlPage{Title: "limpid restoration: " + j.in, Caution: strings.Join(strings.Fields(caution), " "), Finished: time.Now().UTC().Format(time.RFC3339),
		Quicklook: dataURL(quicklookPNG), MetricWindow: window, HasUncertainty: j.uncPath != "", UncertaintyTitle: errorTitle(rep.Method)}
	if psfPNG, err := psfPlotPNG(j.cfg.PSF, rep.PSF); err != nil {
		p.PSFNote = "The PSF figure could not be drawn: " + err.Error()
		warnings = append(warnings, "--report-html: the PSF figure is left out: "+err.Error())
	} else {
		p.PSFPlot = dataURL(psfPNG)
	}
	if convPNG, caption, err := convergencePNG(rep, names); err != nil {
		p.ConvNote = "The convergence figure could not be drawn: " + err.Error()
		warnings = append(warnings, "--report-html: the convergence figure is left out: "+err.Error())
	} else if convPNG == nil {
		p.ConvNote = caption
	} else {
		p.ConvPlot, p.ConvCaption = dataURL(convPNG), caption
	}
	p.Rows = [][2]string{
		{"input", j.in}, {"output", j.out + " (" + string(j.format) + ")"},
		{"scene", fmt.Sprintf("%d x %d pixels, %d bands restored", rep.Width, rep.Height, len(rep.Bands))},
		{"method", "EMS (" + rep.Method + "), convolution " + rep.ConvPath},
	}
	p.Rows = append(p.Rows, recordRows(rep)...) // records.go
	p.Rows = append(p.Rows, [][2]string{
		{"tiles", fmt.Sprintf("%d px, overlap %d, blend %d, %d workers", rep.Tile, rep.Overlap, rep.Blend, rep.Workers)},
		{"seed", fmt.Sprint(rep.Seed)},
		{"wall time", fmt.Sprintf("%.1f s", rep.WallSeconds)},
		{"limpid", rep.Version},
	}...)
	if j.uncPath != "" {
		p.Rows = append(p.Rows, [2]string{"uncertainty", j.uncPath})
	}
	for i, b := range rep.Bands {
		hb := htmlBand{Band: b.Band, Source: b.SourceBand, Name: names[i], ValidPixels: b.ValidPixels, Background: b.Background, Noise: "-", Choice: "-"}
		if b.Noise != nil {
			hb.Noise = fmt.Sprintf("%.4g x signal + %.4g (%s)", b.Noise.A, b.Noise.B, b.Noise.Source)
		}
		hb.Choice = bandSettingsText(b) // records.go
		lo, hi := math.MaxInt, 0
		for _, t := range b.Tiles {
			lo, hi = min(lo, t.Iterations), max(hi, t.Iterations)
		}
		if len(b.Tiles) > 0 {
			hb.Iterations = fmt.Sprintf("%d-%d", lo, hi)
		}
		if b.FluxBefore != 0 {
			hb.FluxChange = fmt.Sprintf("%+.3f", 100*(b.FluxAfter-b.FluxBefore)/b.FluxBefore)
		}
		if i < len(metrics) {
			a := metrics[i]
			hb.NoiseObs, hb.NoiseRes = fmtOr(a.NoiseObserved, "%.3g"), fmtOr(a.NoiseRestored, "%.3g")
			hb.MTF50Obs, hb.MTF50Res, hb.Gain = fmtOr(a.MTF50Observed, "%.3f"), fmtOr(a.MTF50Restored, "%.3f"), fmtOr(a.SharpnessGain, "%.2f")
			hb.Edges = fmt.Sprint(a.Edges)
			hb.RingObs, hb.RingRes = fmtOr(100*a.RingingObserved, "%.1f"), fmtOr(100*a.RingingRestored, "%.1f")
		}
		p.Bands = append(p.Bands, hb)
	}
	var buf bytes.Buffer
	if err := pageTmpl.Execute(&buf, p); err != nil {
		return nil, nil, err
	}
	return buf.Bytes(), warnings, nil
}

// cropMetrics runs step.Assess (no reference) on the centre window of at most
// reportMetricSide pixels a side of every output band.
// It also returns the input bands' descriptions.
func cropMetrics(inPath string, bands []int, outPath string) ([]assess.Band, []raster.BandInfo, string, error) {
	ro, err := gdal.Open(inPath)
	if err != nil {
		return nil, nil, "", err
	}
	defer ro.Close()
	rr, err := gdal.Open(outPath)
	if err != nil {
		return nil, nil, "", err
	}
	defer rr.Close()
	mo, mr := ro.Meta(), rr.Meta()
	cw, ch := min(mr.Width, reportMetricSide), min(mr.Height, reportMetricSide)
	x0, y0 := (mr.Width-cw)/2, (mr.Height-ch)/2
	out := make([]assess.Band, len(bands))
	infos := make([]raster.BandInfo, len(bands))
	for i, b := range bands {
		infos[i] = mo.Bands[b]
		o, err := readBandsWindow(ro, []int{b}, x0, y0, cw, ch)
		if err != nil {
			return nil, nil, "", err
		}
		r, err := readBandsWindow(rr, []int{i}, x0, y0, cw, ch)
		if err != nil {
			return nil, nil, "", err
		}
		valid := make([]bool, cw*ch)
		bo, br := mo.Bands[b], mr.Bands[i]
		for k := range valid {
			valid[k] = raster.Valid(o[0][k], bo.NoData, bo.HasNoData, 0, false) && raster.Valid(r[0][k], br.NoData, br.HasNoData, 0, false)
		}
		out[i] = assess.Measure(o[0], r[0], nil, valid, cw, ch, 0)
	}
	window := fmt.Sprintf("the centre %d x %d window (columns %d-%d, rows %d-%d)", cw, ch, x0, x0+cw-1, y0, y0+ch-1)
	if cw == mr.Width && ch == mr.Height {
		window = "the whole scene"
	}
	return out, infos, window, nil
}

// transfer is |sum h(dx,dy) exp(-2 pi i (fx dx + fy dy))|, the kernel's MTF.
func transfer(k *psf.Kernel, fx, fy float64) float64 {
	var re, im float64
	for y := 0; y < k.H; y++ {
		for x := 0; x < k.W; x++ {
			a := 2 * math.Pi * (fx*float64(x-k.Rx()) + fy*float64(y-k.Ry()))
			re += k.Data[y*k.W+x] * math.Cos(a)
			im -= k.Data[y*k.W+x] * math.Sin(a)
		}
	}
	return math.Hypot(re, im)
}

// plotPNG draws plots side by side into a PNG. gonum/plot panics on data it
// cannot draw (a log axis over values <= 0, for one); that becomes an error.
func plotPNG(plots []*plot.Plot, w, h float64) (png []byte, err error) {
	defer func() {
		if r := recover(); r != nil {
			png, err = nil, fmt.Errorf("%v", r)
		}
	}()
	img := vgimg.New(vg.Points(w), vg.Points(h))
	dc := draw.New(img)
	tiles := draw.Tiles{Rows: 1, Cols: len(plots), PadX: vg.Points(10), PadTop: vg.Points(5), PadBottom: vg.Points(5), PadLeft: vg.Points(5), PadRight: vg.Points(10)}
	cs := plot.Align([][]*plot.Plot{plots}, tiles, dc)
	for i, p := range plots {
		p.Draw(cs[0][i])
	}
	var b bytes.Buffer
	if _, err := (vgimg.PngCanvas{Canvas: img}).WriteTo(&b); err != nil {
		return nil, err
	}
	return b.Bytes(), nil
}

func line(p *plot.Plot, xy plotter.XYs, i int, dashed bool, legend string) error {
	l, err := plotter.NewLine(xy)
	if err != nil {
		return err
	}
	l.Color = plotutil.Color(i)
	if dashed {
		l.Dashes = []vg.Length{vg.Points(4), vg.Points(3)}
	}
	p.Add(l)
	if legend != "" {
		p.Legend.Add(legend, l)
	}
	return nil
}

// curve adds a line of the given colour, width (points) and dash pattern
// (points; none: solid) with its legend entry.
func curve(p *plot.Plot, xy plotter.XYs, col color.Color, width float64, dashes []float64, legend string) error {
	l, err := plotter.NewLine(xy)
	if err != nil {
		return err
	}
	l.Color, l.Width = col, vg.Points(width)
	for _, d := range dashes {
		l.Dashes = append(l.Dashes, vg.Points(d))
	}
	p.Add(l)
	if legend != "" {
		p.Legend.Add(legend, l)
	}
	return nil
}

// sampled returns f at n+1 points from 0 to hi.
func sampled(hi float64, n int, f func(float64) float64) plotter.XYs {
	xy := make(plotter.XYs, n+1)
	for i := range xy {
		x := hi * float64(i) / float64(n)
		xy[i] = plotter.XY{X: x, Y: f(x)}
	}
	return xy
}

// maxGap is the largest |a - b| over the samples of two curves.
func maxGap(a, b plotter.XYs) float64 {
	g := 0.0
	for i := range a {
		g = math.Max(g, math.Abs(a[i].Y-b[i].Y))
	}
	return g
}

// mtfCoincide: two MTF curves closer than this everywhere are drawn
// distinctly but named as one in the legend (one pixel row of the 340 pt
// figure is about 1/250 of the MTF axis).
const mtfCoincide = 0.005

// psfPlotPNG: left, the kernel's profiles through its centre along x and y;
// right, MTFs against frequency in cycles/pixel: the kernel's (the sampled
// PSF the restoration uses, its transfer up to Nyquist; beyond, a sampled
// kernel's transfer only repeats itself), the model's (the continuous
// transfer function the spec names, when it names one) and the system's,
// model (else kernel) times the pixel aperture |sinc f| (the MTF a
// slanted-edge measurement sees, as psf measure reports it), with a marker
// at Nyquist, 0.5 cycles/pixel.
func psfPlotPNG(k *psf.Kernel, spec string) ([]byte, error) {
	pp := plot.New()
	// The spec without --psf auto's note in parentheses (the job table
	// has it whole): a long title is clipped.
	short, _, _ := strings.Cut(spec, " (")
	pp.Title.Text = "PSF " + short + ": profiles through the centre"
	pp.X.Label.Text = "offset (pixels)"
	pp.Y.Label.Text = "weight (kernel sums to 1)"
	pp.Legend.Top = true
	var px, py plotter.XYs
	for dx := -k.Rx(); dx <= k.Rx(); dx++ {
		px = append(px, plotter.XY{X: float64(dx), Y: k.At(dx, 0)})
	}
	for dy := -k.Ry(); dy <= k.Ry(); dy++ {
		py = append(py, plotter.XY{X: float64(dy), Y: k.At(0, dy)})
	}
	if err := curve(pp, px, plotutil.Color(0), 3, nil, "along x (row through centre)"); err != nil {
		return nil, err
	}
	ylabel := "along y (column through centre)"
	if len(px) == len(py) && maxGap(px, py) < 1e-9 {
		ylabel = "along y (= along x)"
	}
	if err := curve(pp, py, plotutil.Color(1), 1.2, []float64{4, 3}, ylabel); err != nil {
		return nil, err
	}
	pm, _, err := mtfPlot(k, spec)
	if err != nil {
		return nil, err
	}
	pp.Add(plotter.NewGrid())
	return plotPNG([]*plot.Plot{pp, pm}, 900, 360)
}

// mtfPlot is psfPlotPNG's right panel; legend lists its legend entries.
func mtfPlot(k *psf.Kernel, spec string) (pm *plot.Plot, legend []string, err error) {
	pm = plot.New()
	add := func(xy plotter.XYs, col color.Color, width float64, dashes []float64, label string) error {
		legend = append(legend, label)
		return curve(pm, xy, col, width, dashes, label)
	}
	pm.Title.Text = "MTF: kernel, model, system"
	pm.X.Label.Text = "frequency (cycles/pixel)"
	pm.Y.Label.Text = "MTF"
	pm.X.Min, pm.X.Max, pm.Y.Min, pm.Y.Max = 0, 1, 0, 1.05
	pm.Legend.Top = true
	const n = 200
	kx := sampled(0.5, n/2, func(f float64) float64 { return transfer(k, f, 0) })
	ky := sampled(0.5, n/2, func(f float64) float64 { return transfer(k, 0, f) })
	sameXY := maxGap(kx, ky) < mtfCoincide
	nyq := func(xy plotter.XYs) float64 { return xy[len(xy)-1].Y }
	if sameXY {
		if err := add(kx, plotutil.Color(0), 3.5, nil, fmt.Sprintf("kernel, fx = fy (%.2g at Nyquist)", nyq(kx))); err != nil {
			return nil, nil, err
		}
	} else {
		if err := add(kx, plotutil.Color(0), 3.5, nil, fmt.Sprintf("kernel along fx (%.2g at Nyquist)", nyq(kx))); err != nil {
			return nil, nil, err
		}
		if err := add(ky, plotutil.Color(1), 3.5, nil, fmt.Sprintf("kernel along fy (%.2g at Nyquist)", nyq(ky))); err != nil {
			return nil, nil, err
		}
	}
	// The model, when the spec names a transfer function (not kernel: or
	// measured:; --psf auto records the Gaussian it measured, then a note in
	// parentheses); in-band parts are defined up to Nyquist only.
	model, hasModel := func(fx, fy float64) float64 { return 0 }, false
	hi := 1.0
	modelSpec, _, _ := strings.Cut(spec, " (")
	if sys, err := psf.ParseTransfer(modelSpec); err == nil {
		model, hasModel = sys.At, true
		if sys.InBand != nil {
			hi = 0.5
		}
	}
	aperture := func(f float64) float64 { return math.Abs(psf.Sinc(f)) }
	black, blue := color.RGBA{0, 0, 0, 255}, color.RGBA{30, 60, 200, 255}
	if hasModel {
		mx := sampled(hi, int(hi*n), func(f float64) float64 { return model(f, 0) })
		my := sampled(hi, int(hi*n), func(f float64) float64 { return model(0, f) })
		axes := []struct {
			xy  plotter.XYs
			k   plotter.XYs
			tag string
		}{{mx, kx, "fx"}, {my, ky, "fy"}}
		if maxGap(mx, my) < mtfCoincide {
			axes = axes[:1]
			axes[0].tag = "fx = fy"
		}
		for i, a := range axes {
			label := "model " + a.tag
			if maxGap(a.xy[:n/2+1], a.k) < mtfCoincide {
				label += " (= kernel up to Nyquist)"
			}
			if err := add(a.xy, black, 1.2, [][]float64{{6, 3}, {6, 2, 1, 2}}[i], label); err != nil {
				return nil, nil, err
			}
			sysXY := sampled(hi, int(hi*n), func(f float64) float64 { return model(f*b2f(a.tag != "fy"), f*b2f(a.tag == "fy")) * aperture(f) })
			sl := fmt.Sprintf("system %s = model x aperture |sinc f| (%.2g at Nyquist)", a.tag, sysXY[n/2].Y)
			if err := add(sysXY, blue, 1.6, [][]float64{{1.5, 2.5}, {1.5, 2.5, 5, 2.5}}[i], sl); err != nil {
				return nil, nil, err
			}
		}
	} else {
		sysXY := make(plotter.XYs, len(kx))
		for i, p := range kx {
			sysXY[i] = plotter.XY{X: p.X, Y: p.Y * aperture(p.X)}
		}
		if err := add(sysXY, blue, 1.6, []float64{1.5, 2.5}, fmt.Sprintf("system fx = kernel x aperture |sinc f| (%.2g at Nyquist)", nyq(sysXY))); err != nil {
			return nil, nil, err
		}
	}
	grey := color.RGBA{120, 120, 120, 255}
	if err := add(plotter.XYs{{X: 0.5, Y: 0}, {X: 0.5, Y: 1.05}}, grey, 1, []float64{2, 2}, "Nyquist, 0.5 cycles/pixel"); err != nil {
		return nil, nil, err
	}
	pm.Add(plotter.NewGrid())
	return pm, legend, nil
}

// b2f is 1 for true, 0 for false.
func b2f(b bool) float64 {
	if b {
		return 1
	}
	return 0
}

// convergencePNG draws the report's convergence figure and returns the
// caption that describes what it drew (nil PNG and a caption when there is
// nothing worth a plot). Left, the first of these that has points: the
// relative change per iteration of the first band's tiles that kept their
// history (a few per scene, when the solver records one); else each tile's
// iterations against its final relative change, for the first band with a
// positive finite final change; else (stop rules that record no change)
// each tile's iteration count, per band. With one tile per band and no
// history, the left panel is left out (one point per band says no more
// than the table). Right: the first band's risk curve per candidate
// bandwidth when the automatic choice ran, the iteration used marked.
func convergencePNG(rep *step.Report, names []string) ([]byte, string, error) {
	pt, left, err := tilesPlot(rep, names)
	if err != nil {
		return nil, "", err
	}
	pr, right, err := riskPlot(rep, names)
	if err != nil {
		return nil, "", err
	}
	var plots []*plot.Plot
	var caption []string
	if pt != nil {
		pt.Add(plotter.NewGrid())
		plots = append(plots, pt)
	}
	if pr != nil {
		pr.Add(plotter.NewGrid())
		plots = append(plots, pr)
	}
	switch {
	case pt != nil && pr != nil:
		caption = []string{"Left: " + left, "Right: " + right}
	case pt != nil:
		caption = []string{"The figure shows " + left, right}
	case pr != nil:
		caption = []string{left, "The figure shows " + right}
	default:
		return nil, left + " " + right, nil
	}
	w := 900.0
	if len(plots) == 1 {
		w = 600
	}
	png, err := plotPNG(plots, w, 340)
	return png, strings.Join(caption, " "), err
}

// tilesPlot is convergencePNG's left panel and its caption (nil with a
// caption saying why when it is left out).
func tilesPlot(rep *step.Report, names []string) (*plot.Plot, string, error) {
	pt := plot.New()
	pt.Title.Text = "tiles: iterations and final change"
	pt.X.Label.Text = "iterations"
	pt.Y.Label.Text = "final relative L1 change"
	pt.Y.Scale = plot.LogScale{}
	pt.Y.Tick.Marker = plot.LogTicks{Prec: -1}
	pt.Legend.Top = true
	particle := ""
	if rep.Method == string(step.MethodParticle) {
		particle = " (particle method: the change between consecutive particle estimates, which Monte Carlo noise keeps from reaching 0; it runs a fixed number of iterations)"
	}
	n, err := addChangeHistories(pt, rep)
	if err != nil {
		return nil, "", err
	}
	if n > 0 {
		return pt, fmt.Sprintf("%s's relative L1 change per iteration for the %d tile(s) that kept their history (log axis)%s.", names[0], n, particle), nil
	}
	oneTile := true
	for _, b := range rep.Bands {
		oneTile = oneTile && len(b.Tiles) <= 1
	}
	if oneTile {
		return nil, "One tile per band: its iteration count is in the table's tile iterations column (no tile plot).", nil
	}
	band, err := addFinalChanges(pt, rep, names)
	if err != nil {
		return nil, "", err
	}
	if band >= 0 {
		if pt.X.Label.Text == "tile (plan order)" {
			return pt, fmt.Sprintf("each tile's final relative L1 change in plan order, %s, one point per tile; every tile ran %d iterations (log axis)%s.", names[band], rep.Bands[band].Tiles[0].Iterations, particle), nil
		}
		return pt, fmt.Sprintf("each tile's iteration count against its final relative L1 change, %s, one point per tile (log axis)%s.", names[band], particle), nil
	}
	pt, err = iterationsPlot(rep, names)
	return pt, "each tile's iteration count, per band, in plan order (the stop rule records no change).", err
}

// addChangeHistories draws the per-iteration relative change of the first
// band's tiles that kept a history of at least two positive finite values,
// and returns how many it drew (the plot's titles are set only then).
func addChangeHistories(pt *plot.Plot, rep *step.Report) (int, error) {
	if len(rep.Bands) == 0 {
		return 0, nil
	}
	n := 0
	for _, t := range rep.Bands[0].Tiles {
		var xy plotter.XYs
		for k, c := range t.Changes {
			if c > 0 && !math.IsInf(c, 0) {
				xy = append(xy, plotter.XY{X: float64(k + 1), Y: c})
			}
		}
		if len(xy) < 2 {
			continue
		}
		if err := line(pt, xy, n, false, fmt.Sprintf("tile (%d,%d)", t.Col, t.Row)); err != nil {
			return 0, err
		}
		n++
	}
	if n > 0 {
		pt.Title.Text = "relative change per iteration (recorded tiles)"
		pt.X.Label.Text = "iteration"
		pt.Y.Label.Text = "relative L1 change"
	}
	return n, nil
}

// addFinalChanges draws each tile's iterations against its final relative
// change for the first band that has a positive finite one, and returns
// that band's index (-1: none).
func addFinalChanges(pt *plot.Plot, rep *step.Report, names []string) (int, error) {
	for i, b := range rep.Bands {
		var xy plotter.XYs
		lo, hi := math.Inf(1), math.Inf(-1)
		same := true
		for k, t := range b.Tiles {
			same = same && t.Iterations == b.Tiles[0].Iterations
			if t.Change > 0 && !math.IsInf(t.Change, 0) {
				xy = append(xy, plotter.XY{X: float64(k), Y: t.Change})
				lo, hi = math.Min(lo, t.Change), math.Max(hi, t.Change)
			}
		}
		// Against the iterations, unless every tile ran the same count
		// (fixed stops, the particle method): then in plan order.
		if same {
			pt.Title.Text = fmt.Sprintf("tiles: final change (each ran %d iterations)", b.Tiles[0].Iterations)
			pt.X.Label.Text = "tile (plan order)"
		} else {
			k := 0
			for _, t := range b.Tiles {
				if t.Change > 0 && !math.IsInf(t.Change, 0) {
					xy[k].X = float64(t.Iterations)
					k++
				}
			}
		}
		if len(xy) == 0 {
			continue
		}
		s, err := plotter.NewScatter(xy)
		if err != nil {
			return -1, err
		}
		s.Color = plotutil.Color(i)
		s.Shape = plotutil.Shape(i)
		pt.Add(s)
		pt.Legend.Add(names[i], s)
		if hi < 2*lo {
			// One decade around a single value: gonum pads an empty range
			// by +-1, below 0 on a log axis.
			pt.Y.Min, pt.Y.Max = lo/3, hi*3
		}
		return i, nil
	}
	return -1, nil
}

// iterationsPlot shows each tile's iteration count per band, for stop rules
// that record no change (auto and discrepancy stops).
func iterationsPlot(rep *step.Report, names []string) (*plot.Plot, error) {
	pt := plot.New()
	pt.Title.Text = "tiles: iterations run"
	pt.X.Label.Text = "tile (plan order)"
	pt.Y.Label.Text = "iterations"
	pt.Legend.Top = true
	for i, b := range rep.Bands {
		var xy plotter.XYs
		for k, t := range b.Tiles {
			xy = append(xy, plotter.XY{X: float64(k), Y: float64(t.Iterations)})
		}
		if len(xy) == 0 {
			continue
		}
		s, err := plotter.NewScatter(xy)
		if err != nil {
			return nil, err
		}
		s.Color, s.Shape = plotutil.Color(i), plotutil.Shape(i)
		pt.Add(s)
		pt.Legend.Add(names[i], s)
	}
	return pt, nil
}

// riskPlot is convergencePNG's right panel and its caption: the first
// band's summed risk curve per candidate of the automatic choice, with the
// iteration used marked by a vertical line (the axis reaches it even when
// the curve ends earlier) and the chosen bandwidth's risk minimum by a
// circle. It is nil, with a caption saying so, when there is no curve.
func riskPlot(rep *step.Report, names []string) (*plot.Plot, string, error) {
	none := "No risk curves: the automatic smoothing/stop choice did not run."
	if len(rep.Bands) == 0 || rep.Bands[0].Choice == nil {
		return nil, none, nil
	}
	ch := rep.Bands[0].Choice
	pr := plot.New()
	pr.X.Label.Text = "iteration"
	pr.Legend.Top = true
	pr.Title.Text = fmt.Sprintf("%s: risk summed over tiles, per candidate", names[0])
	lo, hi, xmax := math.Inf(1), math.Inf(-1), 0.0
	for _, c := range ch.Candidates {
		for _, p := range c.Curve {
			lo, hi, xmax = math.Min(lo, p[1]), math.Max(hi, p[1]), math.Max(xmax, p[0])
		}
	}
	// Log axis of R_k - min R + 1e-4 (max - min): the risk is defined up
	// to a constant, and its fall spans decades.
	eps := 1e-4 * math.Max(hi-lo, 1e-300)
	pr.Y.Scale = plot.LogScale{}
	pr.Y.Tick.Marker = plot.LogTicks{Prec: -1}
	// Short: gonum shrinks the data area to fit an axis label longer than
	// the axis.
	pr.Y.Label.Text = "risk - min risk"
	drawn, marked := false, false
	chosenEnd := 0.0
	for i, c := range ch.Candidates {
		var xy plotter.XYs
		for _, p := range c.Curve {
			xy = append(xy, plotter.XY{X: p[0], Y: p[1] - lo + eps})
		}
		if len(xy) < 2 {
			continue
		}
		label := fmt.Sprintf("smooth %g", c.Smooth)
		width := 1.0
		if c.Smooth == ch.Smooth {
			label += " (chosen)"
			width = 2.2
			chosenEnd = xy[len(xy)-1].X
			for _, p := range xy {
				if c.BestIterations > 0 && int(p.X) == c.BestIterations {
					m, err := plotter.NewScatter(plotter.XYs{p})
					if err != nil {
						return nil, "", err
					}
					m.Shape, m.Color, m.Radius = draw.CircleGlyph{}, plotutil.Color(i), vg.Points(4)
					pr.Add(m)
					pr.Legend.Add(fmt.Sprintf("its risk minimum, %d iterations", c.BestIterations), m)
					marked = true
				}
			}
		}
		if err := curve(pr, xy, plotutil.Color(i), width, nil, label); err != nil {
			return nil, "", err
		}
		drawn = true
	}
	if !drawn {
		return nil, none, nil
	}
	it := float64(ch.Iterations)
	used := fmt.Sprintf("iterations used: %d", ch.Iterations)
	if rep.Method == string(step.MethodParticle) {
		used = fmt.Sprintf("iterations run (particle): %d", ch.Iterations)
	}
	if err := curve(pr, plotter.XYs{{X: it, Y: eps}, {X: it, Y: hi - lo + eps}}, color.RGBA{0, 0, 0, 255}, 1.2, []float64{5, 3}, used); err != nil {
		return nil, "", err
	}
	pr.X.Min, pr.X.Max = 0, math.Max(xmax, it)*1.05
	pr.X.Tick.Marker = plainTicks{}
	circle := ""
	if marked {
		circle = " the circle its risk minimum,"
	}
	text := fmt.Sprintf("%s's risk estimate per iteration, summed over the %d tile(s) used, per candidate bandwidth (log axis of risk - min risk); the thick curve is the chosen smoothing %g,%s the dashed vertical line the iterations used (%d).",
		names[0], ch.TilesUsed, ch.Smooth, circle, ch.Iterations)
	if rep.Method == string(step.MethodParticle) {
		text += " The curves are the grid EMS risk estimate that chose the bandwidth; the particle method runs the fixed --iterations count."
	} else if it > chosenEnd {
		text += fmt.Sprintf(" The iterations used lie beyond the summed curve (it ends at %d): each tile stops at its own risk minimum plus a margin, so the curve summed over the iterations every tile evaluated ends earlier; the choice is the valid-pixel-weighted median of the tiles' own minima.", int(chosenEnd))
	}
	return pr, text, nil
}

// plainTicks are gonum's default ticks labelled in the shortest form
// ("30", not "30.00").
type plainTicks struct{}

func (plainTicks) Ticks(lo, hi float64) []plot.Tick {
	t := plot.DefaultTicks{}.Ticks(lo, hi)
	for i := range t {
		if t[i].Label != "" {
			t[i].Label = strconv.FormatFloat(t[i].Value, 'g', -1, 64)
		}
	}
	return t
}
