package main

import (
	"fmt"
	"io"
	"math"
	"os"

	"github.com/urfave/cli/v2"

	"limpid/raster"
	"limpid/raster/gdal"
	"limpid/step/assess"
)

// assess: judge a restoration (README, "limpid assess", has the metric
// definitions; step/assess.go implements them).

func assessCommand(stdout, stderr io.Writer) *cli.Command {
	return &cli.Command{
		Name:      "assess",
		Usage:     "compare a restoration with its observation (and a reference when known): noise, sharpness, ringing, flux, PSNR, SSIM",
		ArgsUsage: "OBSERVED RESTORED",
		Description: `Per band, over the pixels valid in all inputs (finite, not nodata): noise of
OBSERVED and RESTORED, MTF50 from the slanted edges found in OBSERVED (ISO 12233
e-SFR, the same windows in both) and its gain, a ringing indicator on those
edges, and the flux change. With --reference, OBSERVED and RESTORED are each
compared with it, side by side over the same pixels with the same peak L: PSNR,
SSIM (Wang et al. 2004: 11x11 Gaussian window, sigma 1.5, K1 0.01, K2 0.03),
RMSE, MAE and bias, and the gain (restored minus observed: positive is better
for PSNR and SSIM, negative for RMSE and MAE). The tables go to stdout, --json
writes the same figures. The bands are read one at a time, each whole (peak
memory about 200 bytes per pixel of a band: 0.8 GB for 2048 x 2048).

PSNR/SSIM peak L: --data-range; else the reference's data type range for
integer types (e.g. 65535 for UInt16, so give --data-range 4095 for 12-bit data),
else the reference's max - min over valid pixels, per band.

Example (from the repository's root, on its test scene and its truth):
   limpid restore --psf gaussian:sigma=1.4 testdata/valley256/observed.tif restored.tif
   limpid assess --reference testdata/valley256/reference.tif --data-range 4095 --json metrics.json testdata/valley256/observed.tif restored.tif`,
		Flags: []cli.Flag{
			&cli.StringFlag{Name: "reference", Usage: "the true (sharp) scene, same grid and bands: OBSERVED and RESTORED are both compared with it"},
			&cli.Float64Flag{Name: "data-range", Usage: "peak L of PSNR and SSIM", DefaultText: "the reference's data type range, see the description"},
			&cli.StringFlag{Name: "json", Usage: "also write the figures as JSON to this file"},
		},
		Action: func(c *cli.Context) error {
			if c.IsSet("data-range") && assess.CheckDataRange(c.Float64("data-range")) != nil {
				return usagef("--data-range %g must be a positive number", c.Float64("data-range"))
			}
			ins := []namedPath{{"OBSERVED", c.Args().Get(0)}, {"RESTORED", c.Args().Get(1)}, {"--reference", c.String("reference")}}
			if err := checkOutputs(stdout, stderr, ins, []namedPath{{"--json", c.String("json")}}); err != nil {
				return err
			}
			rep, err := assessFiles(c.Args().Get(0), c.Args().Get(1), c.String("reference"), c.Float64("data-range"))
			if err != nil {
				return err
			}
			if p := c.String("json"); p != "" {
				if err := writeJSON("--json", p, rep); err != nil {
					return err
				}
			}
			printAssessment(stdout, rep)
			return nil
		},
	}
}

// assessReport is assess's JSON output. Figures that cannot be measured
// (no edge found, PSNR of identical images) are null.
type assessReport struct {
	Observed  string           `json:"observed"`
	Restored  string           `json:"restored"`
	Reference string           `json:"reference,omitempty"`
	Bands     []map[string]any `json:"bands"`
}

func finite(v float64) any {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return nil
	}
	return v
}

// fidelityJSON is the JSON object of one comparison with the reference.
func fidelityJSON(f assess.Fidelity) map[string]any {
	return map[string]any{"psnr": finite(f.PSNR), "ssim": finite(f.SSIM), "rmse": finite(f.RMSE), "mae": finite(f.MAE), "bias": finite(f.Bias)}
}

// assessInput is one of assess's open rasters, read a band at a time.
type assessInput struct {
	flag, path string
	r          *gdal.Reader
	m          raster.Meta
}

// openAssessInputs opens OBSERVED, RESTORED and (when refPath is not "")
// the reference and checks their grids before any pixel is read; the
// caller closes what is returned.
func openAssessInputs(obsPath, resPath, refPath string) ([]*assessInput, error) {
	var ins []*assessInput
	fail := func(err error) ([]*assessInput, error) {
		for _, in := range ins {
			in.r.Close()
		}
		return nil, err
	}
	for _, in := range []*assessInput{{flag: "OBSERVED", path: obsPath}, {flag: "RESTORED", path: resPath}, {flag: "--reference", path: refPath}} {
		if in.path == "" {
			continue
		}
		r, err := gdal.Open(in.path)
		if err != nil {
			return fail(fmt.Errorf("%s: %w", in.flag, err))
		}
		in.r, in.m = r, r.Meta()
		ins = append(ins, in)
		// Each band is held whole (with its SSIM planes) before any pixel
		// is read: bound it like every whole-band reader.
		lim, err := raster.LimitsFrom(os.Getenv)
		if err == nil {
			err = lim.CheckWhole(in.flag+" "+in.path, "each band (read one at a time)", in.m.Width, in.m.Height, 1)
		}
		if err != nil {
			return fail(err)
		}
		if mo := ins[0].m; in.m.Width != mo.Width || in.m.Height != mo.Height || len(in.m.Bands) != len(mo.Bands) {
			return fail(usagef("%s %s is %s; OBSERVED %s is %s: they must match", in.flag, in.path, gridText(in.m), obsPath, gridText(mo)))
		}
	}
	return ins, nil
}

// band reads band b (0-based) of the input whole.
func (in *assessInput) band(b int) ([]float32, error) {
	p := [][]float32{make([]float32, in.m.Width*in.m.Height)}
	if err := in.r.ReadRows(0, in.m.Height, []int{b}, p); err != nil {
		return nil, fmt.Errorf("%s: %w", in.flag, err)
	}
	return p[0], nil
}

func validPlane(m raster.Meta, p []float32, b int) []bool {
	v := make([]bool, len(p))
	bi := m.Bands[b]
	for i, x := range p {
		v[i] = raster.Valid(x, bi.NoData, bi.HasNoData, 0, false)
	}
	return v
}

// gridText describes a raster's grid for assess's mismatch messages, e.g.
// "256x256 with 4 bands".
func gridText(m raster.Meta) string {
	if len(m.Bands) == 1 {
		return fmt.Sprintf("%dx%d with 1 band", m.Width, m.Height)
	}
	return fmt.Sprintf("%dx%d with %d bands", m.Width, m.Height, len(m.Bands))
}

// assessFiles runs the assessment of OBSERVED, RESTORED (and REFERENCE when
// refPath is not "") band by band; L <= 0 selects the default peak rule.
func assessFiles(obsPath, resPath, refPath string, L float64) (*assessReport, error) {
	ins, err := openAssessInputs(obsPath, resPath, refPath)
	if err != nil {
		return nil, err
	}
	defer func() {
		for _, in := range ins {
			in.r.Close()
		}
	}()
	mo, mr := ins[0].m, ins[1].m
	w, h := mo.Width, mo.Height
	rep := &assessReport{Observed: obsPath, Restored: resPath, Reference: refPath}
	for b := range mo.Bands {
		obs, err := ins[0].band(b)
		if err != nil {
			return nil, err
		}
		res, err := ins[1].band(b)
		if err != nil {
			return nil, err
		}
		valid, vr := validPlane(mo, obs, b), validPlane(mr, res, b)
		var rb []float32
		var vf []bool
		if len(ins) == 3 {
			if rb, err = ins[2].band(b); err != nil {
				return nil, err
			}
			vf = validPlane(ins[2].m, rb, b)
		}
		n := 0
		for i := range valid {
			valid[i] = valid[i] && vr[i] && (vf == nil || vf[i])
			if valid[i] {
				n++
			}
		}
		if n == 0 {
			return nil, usagef("band %d: no pixel is valid in all inputs (different nodata masks or grids?)", b+1)
		}
		peak := L
		if rb != nil && peak <= 0 {
			peak = assess.Peak(ins[2].m.DataType, rb, valid)
		}
		a := assess.Measure(obs, res, rb, valid, w, h, peak)
		row := map[string]any{
			"band": b + 1, "valid_pixels": a.Pixels,
			"noise_observed": finite(a.NoiseObserved), "noise_restored": finite(a.NoiseRestored), "noise_rule": a.NoiseRule,
			"edges": a.Edges, "mtf50_observed": finite(a.MTF50Observed), "mtf50_restored": finite(a.MTF50Restored),
			"sharpness_gain": finite(a.SharpnessGain), "ringing_observed": finite(a.RingingObserved),
			"ringing_restored": finite(a.RingingRestored), "flux_change": finite(a.FluxChange),
		}
		if rb != nil {
			row["data_range"] = peak
			// The flat keys are RESTORED's figures (as before the side by
			// side objects existed).
			row["psnr"], row["ssim"], row["rmse"], row["mae"], row["bias"] = finite(a.Restored.PSNR), finite(a.Restored.SSIM), finite(a.Restored.RMSE), finite(a.Restored.MAE), finite(a.Restored.Bias)
			row["observed_vs_reference"] = fidelityJSON(a.Observed)
			row["restored_vs_reference"] = fidelityJSON(a.Restored)
			row["gain"] = fidelityJSON(a.Restored.Gain(a.Observed))
		}
		rep.Bands = append(rep.Bands, row)
	}
	return rep, nil
}

// printAssessment writes assess's tables: one row per band, then with a
// reference the comparison table, rows observed, restored and gain per band.
func printAssessment(w io.Writer, rep *assessReport) {
	f := func(v any, format string) string {
		if x, ok := v.(float64); ok {
			return fmt.Sprintf(format, x)
		}
		return "-"
	}
	fmt.Fprintf(w, "%-4s %11s %11s %8s %8s %8s %5s %9s %9s %7s %8s\n", "band", "noise obs", "noise res", "MTF50 o", "MTF50 r", "gain", "edges", "ring obs", "ring res", "flux %", "pixels")
	for _, b := range rep.Bands {
		flux := "-"
		if x, ok := b["flux_change"].(float64); ok {
			flux = fmt.Sprintf("%.3f", 100*x)
		}
		fmt.Fprintf(w, "%-4d %11s %11s %8s %8s %8s %5d %9s %9s %7s %8d\n", b["band"], f(b["noise_observed"], "%.3f"), f(b["noise_restored"], "%.3f"),
			f(b["mtf50_observed"], "%.4f"), f(b["mtf50_restored"], "%.4f"), f(b["sharpness_gain"], "%.3f"), b["edges"],
			f(b["ringing_observed"], "%.4f"), f(b["ringing_restored"], "%.4f"), flux, b["valid_pixels"])
	}
	if rep.Reference == "" {
		return
	}
	fmt.Fprintf(w, "\n%-4s %-9s %9s %8s %9s %9s %9s %8s\n", "band", "vs ref", "PSNR dB", "SSIM", "RMSE", "MAE", "bias", "L")
	for _, b := range rep.Bands {
		for _, r := range []struct{ name, key, sign string }{
			{"observed", "observed_vs_reference", ""}, {"restored", "restored_vs_reference", ""}, {"gain", "gain", "+"}} {
			m := b[r.key].(map[string]any)
			psnr := f(m["psnr"], "%"+r.sign+".3f")
			if r.key != "gain" && m["psnr"] == nil && m["rmse"] == 0.0 {
				psnr = "inf" // identical to the reference
			}
			L := f(b["data_range"], "%g")
			if r.key == "gain" {
				L = "-"
			}
			fmt.Fprintf(w, "%-4d %-9s %9s %8s %9s %9s %9s %8s\n", b["band"], r.name, psnr, f(m["ssim"], "%"+r.sign+".5f"),
				f(m["rmse"], "%"+r.sign+".3f"), f(m["mae"], "%"+r.sign+".3f"), f(m["bias"], "%+.3f"), L)
		}
	}
}
