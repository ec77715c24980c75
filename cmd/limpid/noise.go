package main

import (
	"fmt"
	"io"
	"math"
	"strconv"
	"text/tabwriter"

	"github.com/urfave/cli/v2"

	"limpid/raster/gdal"
	"limpid/step"
	"limpid/step/noise"
)

// noiseCommand estimates the per-band noise model (var = a*DN + b) the way
// restore does for --smooth auto, --stop auto and --stop discrepancy
// (step.EstimateNoise: Immerkaer's residual, CVIU 64(2):300-302, 1996, in a
// Poisson-Gaussian fit simplified from Foi, Trimeche, Katkovnik & Egiazarian,
// IEEE TIP 17(10):1737-1754, 2008).
func noiseCommand(stdin io.Reader, stdout, stderr io.Writer) *cli.Command {
	return &cli.Command{
		Name:      "noise",
		Usage:     "estimate each band's noise model var = a*DN + b from the scene itself",
		ArgsUsage: "INPUT",
		Description: `Fits a Poisson-Gaussian noise model per band on smooth, valid pixels of up to
16 tiles spread over the scene (Immerkaer's residual, robust variance per
intensity bin, weighted line fit). a is gain-like (DN per electron), b the
variance at zero signal (read noise squared plus quantisation). Nodata and
--saturated pixels are left out. The table goes to stdout; --json writes
every bin. Pass the numbers back with restore --noise a=...,b=... to reuse
or override them.`,
		Flags: []cli.Flag{
			&cli.StringFlag{Name: "bands", Usage: "1-based bands, e.g. 1,3 (default: all)"},
			&cli.StringFlag{Name: "saturated", Usage: "pixels at or above this value are left out"},
			&cli.IntFlag{Name: "tile", Value: step.DefaultTile, Usage: "tile size of the sampling grid"},
			&cli.StringFlag{Name: "json", Usage: "write the models with their bins to this JSON file"},
		},
		Action: func(c *cli.Context) error { return noiseAction(c, stdin, stdout) },
	}
}

func noiseAction(c *cli.Context, stdin io.Reader, stdout io.Writer) error {
	in := c.Args().Get(0)
	if err := checkOutputs(stdout, c.App.ErrWriter, []namedPath{{"INPUT", in}}, []namedPath{{"--json", c.String("json")}}); err != nil {
		return err
	}
	path, done, err := spoolInput(in, stdin)
	if err != nil {
		return err
	}
	defer done()
	if t := c.Int("tile"); t < 16 || t > 16384 {
		return usagef("--tile %d must be between 16 and 16384", t)
	}
	src, err := gdal.Open(path)
	if err != nil {
		return err
	}
	defer src.Close()
	meta := src.Meta()
	bands, err := parseBands(c.String("bands"), len(meta.Bands))
	if err != nil {
		return err
	}
	cfg := step.Config{Tile: c.Int("tile"), Overlap: 16, Workers: 0}
	if s := c.String("saturated"); s != "" {
		v, err := strconv.ParseFloat(s, 64)
		if err != nil || math.IsNaN(v) {
			return usagef("--saturated %q is not a number", s)
		}
		cfg.Saturated, cfg.HasSaturated = v, true
	}
	models, err := step.EstimateNoise(c.Context, src, bands, cfg)
	if err != nil {
		return err
	}
	out := printNoiseModels(stdout, bands, models)
	if p := c.String("json"); p != "" {
		return writeJSON("--json", p, map[string]any{"input": in, "model": "variance = a * DN + b", "bands": out})
	}
	return nil
}

// noiseBand is one band of noise's JSON output.
type noiseBand struct {
	Band int `json:"band"`
	noise.Model
}

// printNoiseModels prints the table of the models of the 0-based bands and
// returns them as noise's JSON rows.
func printNoiseModels(w io.Writer, bands []int, models []noise.Model) []noiseBand {
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintln(tw, "band\ta\ta stderr\tb\tb stderr\tsigma at b\tbins used\tsamples\t")
	var out []noiseBand
	for i, m := range models {
		used := 0
		for _, b := range m.Bins {
			if b.Used {
				used++
			}
		}
		fmt.Fprintf(tw, "%d\t%.4g\t%.2g\t%.4g\t%.2g\t%.3g\t%d/%d\t%d\t\n", bands[i]+1, m.A, m.SigmaA, m.B, m.SigmaB, math.Sqrt(math.Max(m.B, 0)), used, len(m.Bins), m.Samples)
		out = append(out, noiseBand{Band: bands[i] + 1, Model: m})
	}
	tw.Flush()
	return out
}
