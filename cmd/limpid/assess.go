package main

import (
	"fmt"
	"io"
	"math"

	"github.com/urfave/cli/v2"

	"limpid/raster"
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
edges, and the flux change; with --reference also PSNR, SSIM (Wang et al. 2004:
11x11 Gaussian window, sigma 1.5, K1 0.01, K2 0.03), RMSE, MAE and bias of
RESTORED against it. The table goes to stdout, --json writes the same figures.
Each band is read whole into memory (about 100 bytes per pixel with SSIM).

PSNR/SSIM peak L: --data-range; else the reference's data type range for
integer types (e.g. 65535 for UInt16, so give --data-range 4095 for 12-bit data),
else the reference's max - min over valid pixels, per band.`,
		Flags: []cli.Flag{
			&cli.StringFlag{Name: "reference", EnvVars: env("reference"), Usage: "the true (sharp) scene, same grid and bands"},
			&cli.Float64Flag{Name: "data-range", EnvVars: env("data-range"), Usage: "peak L of PSNR and SSIM (default: see the description)"},
			&cli.StringFlag{Name: "json", EnvVars: env("json"), Usage: "also write the figures as JSON to this file"},
		},
		Action: func(c *cli.Context) error {
			if c.NArg() != 2 {
				return usagef("assess needs OBSERVED and RESTORED after the flags (got %d arguments); flags after the arguments are not read", c.NArg())
			}
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

func readPlanes(flag, path string) (raster.Meta, [][]float32, error) {
	m, p, err := readAll(path)
	if err != nil {
		return m, nil, fmt.Errorf("%s: %w", flag, err)
	}
	return m, p, nil
}

func validPlane(m raster.Meta, p []float32, b int) []bool {
	v := make([]bool, len(p))
	bi := m.Bands[b]
	for i, x := range p {
		v[i] = raster.Valid(x, bi.NoData, bi.HasNoData, 0, false)
	}
	return v
}

// assessFiles runs the assessment of OBSERVED, RESTORED (and REFERENCE when
// refPath is not "") band by band; L <= 0 selects the default peak rule.
func assessFiles(obsPath, resPath, refPath string, L float64) (*assessReport, error) {
	mo, obs, err := readPlanes("OBSERVED", obsPath)
	if err != nil {
		return nil, err
	}
	mr, res, err := readPlanes("RESTORED", resPath)
	if err != nil {
		return nil, err
	}
	if mo.Width != mr.Width || mo.Height != mr.Height || len(mo.Bands) != len(mr.Bands) {
		return nil, usagef("RESTORED %s is %dx%d with %d bands; OBSERVED %s is %dx%d with %d bands: they must match",
			resPath, mr.Width, mr.Height, len(mr.Bands), obsPath, mo.Width, mo.Height, len(mo.Bands))
	}
	var mf raster.Meta
	var ref [][]float32
	if refPath != "" {
		mf, ref, err = readPlanes("--reference", refPath)
		if err != nil {
			return nil, err
		}
		if mf.Width != mo.Width || mf.Height != mo.Height || len(mf.Bands) != len(mo.Bands) {
			return nil, usagef("--reference %s is %dx%d with %d bands; OBSERVED %s is %dx%d with %d bands: they must match",
				refPath, mf.Width, mf.Height, len(mf.Bands), obsPath, mo.Width, mo.Height, len(mo.Bands))
		}
	}
	w, h := mo.Width, mo.Height
	rep := &assessReport{Observed: obsPath, Restored: resPath, Reference: refPath}
	for b := range obs {
		valid := validPlane(mo, obs[b], b)
		vr := validPlane(mr, res[b], b)
		var vf []bool
		if ref != nil {
			vf = validPlane(mf, ref[b], b)
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
		var rb []float32
		if ref != nil {
			rb = ref[b]
			if peak <= 0 {
				peak = assess.Peak(mf.DataType, rb, valid)
			}
		}
		a := assess.Measure(obs[b], res[b], rb, valid, w, h, peak)
		row := map[string]any{
			"band": b + 1, "valid_pixels": a.Pixels,
			"noise_observed": finite(a.NoiseObserved), "noise_restored": finite(a.NoiseRestored), "noise_rule": a.NoiseRule,
			"edges": a.Edges, "mtf50_observed": finite(a.MTF50Observed), "mtf50_restored": finite(a.MTF50Restored),
			"sharpness_gain": finite(a.SharpnessGain), "ringing_observed": finite(a.RingingObserved),
			"ringing_restored": finite(a.RingingRestored), "flux_change": finite(a.FluxChange),
		}
		if ref != nil {
			row["data_range"] = peak
			row["psnr"], row["ssim"], row["rmse"], row["mae"], row["bias"] = finite(a.PSNR), finite(a.SSIM), finite(a.RMSE), finite(a.MAE), finite(a.Bias)
		}
		rep.Bands = append(rep.Bands, row)
	}
	return rep, nil
}

func printAssessment(w io.Writer, rep *assessReport) {
	f := func(v any, format string) string {
		if x, ok := v.(float64); ok {
			return fmt.Sprintf(format, x)
		}
		return "-"
	}
	withRef := rep.Reference != ""
	fmt.Fprintf(w, "%-4s %11s %11s %8s %8s %8s %5s %9s %9s %7s %8s", "band", "noise obs", "noise res", "MTF50 o", "MTF50 r", "gain", "edges", "ring obs", "ring res", "flux %", "pixels")
	if withRef {
		fmt.Fprintf(w, " %9s %7s %9s %9s %9s %8s", "PSNR dB", "SSIM", "RMSE", "MAE", "bias", "L")
	}
	fmt.Fprintln(w)
	for _, b := range rep.Bands {
		flux := "-"
		if x, ok := b["flux_change"].(float64); ok {
			flux = fmt.Sprintf("%.3f", 100*x)
		}
		fmt.Fprintf(w, "%-4d %11s %11s %8s %8s %8s %5d %9s %9s %7s %8d", b["band"], f(b["noise_observed"], "%.3f"), f(b["noise_restored"], "%.3f"),
			f(b["mtf50_observed"], "%.4f"), f(b["mtf50_restored"], "%.4f"), f(b["sharpness_gain"], "%.3f"), b["edges"],
			f(b["ringing_observed"], "%.4f"), f(b["ringing_restored"], "%.4f"), flux, b["valid_pixels"])
		if withRef {
			psnr := f(b["psnr"], "%.3f")
			if b["psnr"] == nil && b["rmse"] == 0.0 {
				psnr = "inf"
			}
			fmt.Fprintf(w, " %9s %7s %9s %9s %9s %8s", psnr, f(b["ssim"], "%.5f"), f(b["rmse"], "%.3f"), f(b["mae"], "%.3f"), f(b["bias"], "%.3f"), f(b["data_range"], "%g"))
		}
		fmt.Fprintln(w)
	}
}
