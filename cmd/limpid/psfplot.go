package main

import (
	"fmt"
	"image/color"
	"io"
	"math"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/plotutil"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
	"gonum.org/v1/plot/vg/vgimg"

	"limpid/psf"
)

// writePlot draws the measured edges as a PNG: left, each edge's e-SFR
// with its fitted model exp(-2 pi^2 s^2 f^2)|sinc f| (dashed), both in the
// legend, up to 1 cycle/pixel with a marker at Nyquist; right, its ESF (normalised 0..1) and LSF (normalised to peak
// 1) against the distance to the edge.
func writePlot(w io.Writer, edges []edgeSummary) error {
	pm := plot.New()
	pm.Title.Text = "e-SFR (pixel aperture included)"
	pm.X.Label.Text = "frequency (cycles/pixel)"
	pm.Y.Label.Text = "MTF"
	pm.X.Min, pm.X.Max, pm.Y.Min, pm.Y.Max = 0, 1, 0, 1.05
	pm.Legend.Top = true
	pe := plot.New()
	pe.Title.Text = "ESF (solid) and LSF (dashed)"
	pe.X.Label.Text = "distance to the edge (pixels)"
	pe.Y.Label.Text = "normalised"
	for i, e := range edges {
		r := e.res
		col := plotutil.Color(i)
		var mtf, model plotter.XYs
		for k, f := range r.Freq {
			if f > 1 {
				break
			}
			mtf = append(mtf, plotter.XY{X: f, Y: r.MTF[k]})
			model = append(model, plotter.XY{X: f, Y: psf.MTFGaussian(f, e.Sigma) * math.Abs(psf.Sinc(f))})
		}
		lm, err := plotter.NewLine(mtf)
		if err != nil {
			return err
		}
		lm.Color = col
		lf, err := plotter.NewLine(model)
		if err != nil {
			return err
		}
		lf.Color, lf.Dashes = col, []vg.Length{vg.Points(4), vg.Points(3)}
		pm.Add(lm, lf)
		pm.Legend.Add(fmt.Sprintf("edge %d: measured e-SFR", i+1), lm)
		pm.Legend.Add(fmt.Sprintf("edge %d: fitted model, Gaussian sigma %.2f px x |sinc f|", i+1, e.Sigma), lf)
		lo, hi := math.Inf(1), math.Inf(-1)
		for _, v := range r.ESF {
			lo, hi = math.Min(lo, v), math.Max(hi, v)
		}
		peak := 0.0
		for _, v := range r.LSF {
			peak = math.Max(peak, v)
		}
		c := float64(len(r.ESF)) / 2
		var esf, lsf plotter.XYs
		for j := range r.ESF {
			d := (float64(j) - c) * r.ESFStep
			esf = append(esf, plotter.XY{X: d, Y: (r.ESF[j] - lo) / math.Max(hi-lo, 1e-30)})
			lsf = append(lsf, plotter.XY{X: d, Y: r.LSF[j] / math.Max(peak, 1e-30)})
		}
		le, err := plotter.NewLine(esf)
		if err != nil {
			return err
		}
		le.Color = col
		ll, err := plotter.NewLine(lsf)
		if err != nil {
			return err
		}
		ll.Color, ll.Dashes = col, []vg.Length{vg.Points(4), vg.Points(3)}
		pe.Add(le, ll)
	}
	nyq, err := plotter.NewLine(plotter.XYs{{X: 0.5, Y: 0}, {X: 0.5, Y: 1.05}})
	if err != nil {
		return err
	}
	nyq.Color, nyq.Dashes = color.RGBA{120, 120, 120, 255}, []vg.Length{vg.Points(2), vg.Points(2)}
	pm.Add(nyq)
	pm.Legend.Add("Nyquist, 0.5 cycles/pixel", nyq)
	pm.Add(plotter.NewGrid())
	pe.Add(plotter.NewGrid())
	img := vgimg.New(vg.Points(900), vg.Points(380))
	dc := draw.New(img)
	tiles := draw.Tiles{Rows: 1, Cols: 2, PadX: vg.Points(10), PadTop: vg.Points(5), PadBottom: vg.Points(5), PadLeft: vg.Points(5), PadRight: vg.Points(10)}
	cs := plot.Align([][]*plot.Plot{{pm, pe}}, tiles, dc)
	pm.Draw(cs[0][0])
	pe.Draw(cs[0][1])
	_, err = vgimg.PngCanvas{Canvas: img}.WriteTo(w)
	return err
}
