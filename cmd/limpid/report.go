package main

import (
	"bytes"
	"encoding/base64"
	"fmt"
	"html/template"
	"math"
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
	Title                          string
	Rows                           [][2]string
	PSFPlot, Quicklook, ConvPlot   template.URL
	Bands                          []htmlBand
	MetricWindow                   string
	Caution                        string
	Finished                       string
	HasUncertainty, HasConvergence bool
	// PSFNote and ConvNote replace a figure that could not be drawn.
	PSFNote, ConvNote string
}

var pageTmpl = template.Must(template.New("page").Parse(`<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8"><title>{{.Title}}</title>
<style>
body{font-family:sans-serif;max-width:1100px;margin:1em auto;color:#222}
table{border-collapse:collapse;margin:0.5em 0}td,th{border:1px solid #bbb;padding:2px 6px;text-align:right}
th{background:#eee}td.l{text-align:left}img{max-width:100%;border:1px solid #ccc}
.caution{border:2px solid #a33;padding:0.6em;background:#fff4f4;white-space:pre-wrap}
</style></head><body>
<h1>{{.Title}}</h1>
<p class="caution">{{.Caution}}</p>
<h2>Job</h2>
<table>{{range .Rows}}<tr><th>{{index . 0}}</th><td class="l">{{index . 1}}</td></tr>{{end}}</table>
<h2>PSF and its MTF</h2>
{{if .PSFPlot}}<img id="psf" alt="PSF profiles and MTF" src="{{.PSFPlot}}">{{else}}<p class="note" id="psf-note">{{.PSFNote}}</p>{{end}}
<h2>Observed | restored{{if .HasUncertainty}} | Monte Carlo standard error{{end}}</h2>
<p>Centre crop; observed and restored share one 2-98 % stretch per channel; scale bar in map units.</p>
<img id="quicklook" alt="quicklook" src="{{.Quicklook}}">
<h2>Per-band metrics</h2>
<p>Noise, MTF50 (ISO 12233 slanted edges found in the observation, same windows in both),
ringing (overshoot beyond the edge plateaus / step) measured on {{.MetricWindow}};
flux over the whole band from the run. Definitions: README, "limpid assess".</p>
<table><tr><th>band</th><th>source</th><th>noise model</th><th>choice</th><th>tile iterations</th>
<th>noise obs</th><th>noise res</th><th>MTF50 obs</th><th>MTF50 res</th><th>gain</th><th>edges</th>
<th>ringing obs</th><th>ringing res</th><th>flux change</th><th>valid pixels</th></tr>
{{range .Bands}}<tr><td>{{.Band}}</td><td>{{.Source}}</td><td class="l">{{.Noise}}</td><td class="l">{{.Choice}}</td><td>{{.Iterations}}</td>
<td>{{.NoiseObs}}</td><td>{{.NoiseRes}}</td><td>{{.MTF50Obs}}</td><td>{{.MTF50Res}}</td><td>{{.Gain}}</td><td>{{.Edges}}</td>
<td>{{.RingObs}}</td><td>{{.RingRes}}</td><td>{{.FluxChange}}</td><td>{{.ValidPixels}}</td></tr>
{{end}}</table>
<h2>Convergence</h2>
{{if .ConvPlot}}<img id="convergence" alt="convergence" src="{{.ConvPlot}}">{{else}}<p class="note" id="convergence-note">{{.ConvNote}}</p>{{end}}
<p>Left: each tile's iterations and final relative L1 change (one point per tile), or, when the stop rule records no change, each tile's iterations.
{{if .HasConvergence}}Right: the automatic choice's risk estimate per iteration, summed over the tiles used, per candidate bandwidth (band 1; the minimum is marked by the choice).{{else}}Right: no risk curves (the automatic choice was not used).{{end}}</p>
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
	metrics, window, err := cropMetrics(inPath, bands, j.out)
	if err != nil {
		return nil, nil, err
	}
	p := htmlPage{Title: "limpid restoration: " + j.in, Caution: caution, Finished: time.Now().UTC().Format(time.RFC3339),
		Quicklook: dataURL(quicklookPNG), MetricWindow: window, HasUncertainty: j.uncPath != ""}
	if psfPNG, err := psfPlotPNG(j.cfg.PSF, rep.PSF); err != nil {
		p.PSFNote = "The PSF figure could not be drawn: " + err.Error()
		warnings = append(warnings, "--report-html: the PSF figure is left out: "+err.Error())
	} else {
		p.PSFPlot = dataURL(psfPNG)
	}
	if convPNG, hasRisk, err := convergencePNG(rep); err != nil {
		p.ConvNote = "The convergence figure could not be drawn: " + err.Error()
		warnings = append(warnings, "--report-html: the convergence figure is left out: "+err.Error())
	} else {
		p.ConvPlot, p.HasConvergence = dataURL(convPNG), hasRisk
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
		hb := htmlBand{Band: b.Band, Source: b.SourceBand, ValidPixels: b.ValidPixels, Background: b.Background, Noise: "-", Choice: "-"}
		if b.Noise != nil {
			hb.Noise = fmt.Sprintf("var = %.4g DN + %.4g (%s)", b.Noise.A, b.Noise.B, b.Noise.Source)
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
			hb.FluxChange = fmt.Sprintf("%+.3f %%", 100*(b.FluxAfter-b.FluxBefore)/b.FluxBefore)
		}
		if i < len(metrics) {
			a := metrics[i]
			hb.NoiseObs, hb.NoiseRes = fmtOr(a.NoiseObserved, "%.3g"), fmtOr(a.NoiseRestored, "%.3g")
			hb.MTF50Obs, hb.MTF50Res, hb.Gain = fmtOr(a.MTF50Observed, "%.3f"), fmtOr(a.MTF50Restored, "%.3f"), fmtOr(a.SharpnessGain, "%.2f")
			hb.Edges = fmt.Sprint(a.Edges)
			hb.RingObs, hb.RingRes = fmtOr(a.RingingObserved, "%.3f"), fmtOr(a.RingingRestored, "%.3f")
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
func cropMetrics(inPath string, bands []int, outPath string) ([]assess.Band, string, error) {
	ro, err := gdal.Open(inPath)
	if err != nil {
		return nil, "", err
	}
	defer ro.Close()
	rr, err := gdal.Open(outPath)
	if err != nil {
		return nil, "", err
	}
	defer rr.Close()
	mo, mr := ro.Meta(), rr.Meta()
	cw, ch := min(mr.Width, reportMetricSide), min(mr.Height, reportMetricSide)
	x0, y0 := (mr.Width-cw)/2, (mr.Height-ch)/2
	out := make([]assess.Band, len(bands))
	for i, b := range bands {
		o, err := readBandsWindow(ro, []int{b}, x0, y0, cw, ch)
		if err != nil {
			return nil, "", err
		}
		r, err := readBandsWindow(rr, []int{i}, x0, y0, cw, ch)
		if err != nil {
			return nil, "", err
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
	return out, window, nil
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

// psfPlotPNG: left, the kernel's profiles through its centre along x and y;
// right, its MTF along fx and fy up to Nyquist.
func psfPlotPNG(k *psf.Kernel, spec string) ([]byte, error) {
	pp := plot.New()
	pp.Title.Text = "PSF " + spec
	pp.X.Label.Text = "offset (pixels)"
	pp.Y.Label.Text = "weight"
	pp.Legend.Top = true
	var px, py plotter.XYs
	for dx := -k.Rx(); dx <= k.Rx(); dx++ {
		px = append(px, plotter.XY{X: float64(dx), Y: k.At(dx, 0)})
	}
	for dy := -k.Ry(); dy <= k.Ry(); dy++ {
		py = append(py, plotter.XY{X: float64(dy), Y: k.At(0, dy)})
	}
	if err := line(pp, px, 0, false, "along x (row through centre)"); err != nil {
		return nil, err
	}
	if err := line(pp, py, 1, true, "along y (column through centre)"); err != nil {
		return nil, err
	}
	pm := plot.New()
	pm.Title.Text = "MTF of the PSF"
	pm.X.Label.Text = "frequency (cycles/pixel)"
	pm.Y.Label.Text = "MTF"
	pm.X.Min, pm.X.Max, pm.Y.Min, pm.Y.Max = 0, 0.5, 0, 1.05
	pm.Legend.Top = true
	var mx, my plotter.XYs
	for i := 0; i <= 100; i++ {
		f := 0.005 * float64(i)
		mx = append(mx, plotter.XY{X: f, Y: transfer(k, f, 0)})
		my = append(my, plotter.XY{X: f, Y: transfer(k, 0, f)})
	}
	if err := line(pm, mx, 0, false, "fx"); err != nil {
		return nil, err
	}
	if err := line(pm, my, 1, true, "fy"); err != nil {
		return nil, err
	}
	pp.Add(plotter.NewGrid())
	pm.Add(plotter.NewGrid())
	return plotPNG([]*plot.Plot{pp, pm}, 900, 340)
}

// convergencePNG draws the report's convergence figure and reports whether
// it shows risk curves. Left, the first of these that has points: the
// relative change per iteration of the first band's tiles that kept their
// history (a few per scene, when the solver records one); else each tile's
// iterations against its final relative change, for the first band with a
// positive finite final change; else (stop rules that record no change)
// each tile's iteration count, per band. Right: the first band's risk curve
// per candidate bandwidth when the automatic choice ran.
func convergencePNG(rep *step.Report) ([]byte, bool, error) {
	pt, err := tilesPlot(rep)
	if err != nil {
		return nil, false, err
	}
	pr, hasRisk, err := riskPlot(rep)
	if err != nil {
		return nil, false, err
	}
	pt.Add(plotter.NewGrid())
	pr.Add(plotter.NewGrid())
	png, err := plotPNG([]*plot.Plot{pt, pr}, 900, 340)
	return png, hasRisk, err
}

// tilesPlot is convergencePNG's left panel.
func tilesPlot(rep *step.Report) (*plot.Plot, error) {
	pt := plot.New()
	pt.Title.Text = "tiles: iterations and final change"
	pt.X.Label.Text = "iterations"
	pt.Y.Label.Text = "final relative L1 change"
	pt.Y.Scale = plot.LogScale{}
	pt.Y.Tick.Marker = plot.LogTicks{Prec: -1}
	pt.Legend.Top = true
	drawn, err := addChangeHistories(pt, rep)
	if err != nil || drawn {
		return pt, err
	}
	drawn, err = addFinalChanges(pt, rep)
	if err != nil || drawn {
		return pt, err
	}
	return iterationsPlot(rep)
}

// addChangeHistories draws the per-iteration relative change of the first
// band's tiles that kept a history of at least two positive finite values,
// and reports whether it drew any (the plot's titles are set only then).
func addChangeHistories(pt *plot.Plot, rep *step.Report) (bool, error) {
	if len(rep.Bands) == 0 {
		return false, nil
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
			return false, err
		}
		n++
	}
	if n > 0 {
		pt.Title.Text = fmt.Sprintf("band %d: relative change per iteration (recorded tiles)", rep.Bands[0].Band)
		pt.X.Label.Text = "iteration"
		pt.Y.Label.Text = "relative L1 change"
	}
	return n > 0, nil
}

// addFinalChanges draws each tile's iterations against its final relative
// change for the first band that has a positive finite one, and reports
// whether it drew any.
func addFinalChanges(pt *plot.Plot, rep *step.Report) (bool, error) {
	for i, b := range rep.Bands {
		var xy plotter.XYs
		for _, t := range b.Tiles {
			if t.Change > 0 && !math.IsInf(t.Change, 0) {
				xy = append(xy, plotter.XY{X: float64(t.Iterations), Y: t.Change})
			}
		}
		if len(xy) == 0 {
			continue
		}
		s, err := plotter.NewScatter(xy)
		if err != nil {
			return false, err
		}
		s.Color = plotutil.Color(i)
		s.Shape = plotutil.Shape(i)
		pt.Add(s)
		pt.Legend.Add(fmt.Sprintf("band %d", b.Band), s)
		return true, nil
	}
	return false, nil
}

// iterationsPlot shows each tile's iteration count per band, for stop rules
// that record no change (auto and discrepancy stops).
func iterationsPlot(rep *step.Report) (*plot.Plot, error) {
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
		pt.Legend.Add(fmt.Sprintf("band %d", b.Band), s)
	}
	return pt, nil
}

// riskPlot is convergencePNG's right panel: the first band's risk curve per
// candidate of the automatic choice; it reports whether it drew any.
func riskPlot(rep *step.Report) (*plot.Plot, bool, error) {
	pr := plot.New()
	pr.X.Label.Text = "iteration"
	pr.Y.Label.Text = "risk estimate (summed, relative)"
	pr.Legend.Top = true
	hasRisk := false
	if len(rep.Bands) > 0 && rep.Bands[0].Choice != nil {
		ch := rep.Bands[0].Choice
		pr.Title.Text = fmt.Sprintf("band %d: risk per candidate (chosen smooth %g, %d it.)", rep.Bands[0].Band, ch.Smooth, ch.Iterations)
		lo, hi := math.Inf(1), math.Inf(-1)
		for _, c := range ch.Candidates {
			for _, p := range c.Curve {
				lo, hi = math.Min(lo, p[1]), math.Max(hi, p[1])
			}
		}
		// Log axis of R_k - min R + 1e-4 (max - min): the risk is defined up
		// to a constant, and its fall spans decades.
		eps := 1e-4 * math.Max(hi-lo, 1e-300)
		pr.Y.Scale = plot.LogScale{}
		pr.Y.Tick.Marker = plot.LogTicks{Prec: -1}
		pr.Y.Label.Text = "risk - min risk (summed over tiles)"
		for i, c := range ch.Candidates {
			var xy plotter.XYs
			for _, p := range c.Curve {
				xy = append(xy, plotter.XY{X: p[0], Y: p[1] - lo + eps})
			}
			if len(xy) < 2 {
				continue
			}
			if err := line(pr, xy, i, false, fmt.Sprintf("smooth %g", c.Smooth)); err != nil {
				return nil, false, err
			}
			hasRisk = true
		}
		if !hasRisk {
			pr.Y.Scale, pr.Y.Tick.Marker = plot.LinearScale{}, plot.DefaultTicks{}
		}
	}
	if !hasRisk {
		pr.Title.Text = "no risk curves (fixed smoothing and stop)"
	}
	return pr, hasRisk, nil
}
