package main

import (
	"errors"
	"fmt"
	"io"
	"strings"

	"github.com/urfave/cli/v2"

	"limpid/psf"
	"limpid/raster/gdal"
	"limpid/step"
	"limpid/step/conv"
	"limpid/step/simulate"
)

// simulate: degrade a sharp raster into a simulated observation (blur with
// the PSF, sensor noise, quantisation), for validating restore settings on
// scenes whose truth is known.

func simulateCommand(stdin io.Reader, stdout, stderr io.Writer) *cli.Command {
	return &cli.Command{
		Name:      "simulate",
		Usage:     "degrade a sharp raster: blur with a PSF, add noise, quantise (flags come before INPUT OUTPUT)",
		ArgsUsage: "INPUT OUTPUT",
		Description: `Blurs every band of INPUT with the PSF (the operator restore uses: half-sample
symmetric boundaries; near nodata, a convolution normalised over valid pixels),
adds noise, rounds to nearest and clamps to --quantize, and writes OUTPUT with
INPUT's georeferencing, band descriptions and nodata (nodata pixels stay nodata;
a valid pixel that would round onto the nodata value moves one step inwards).
The random streams depend only on --seed, the band and the row.

Noise (DN):
   poisson:gain=G,read=R   DN = G * Poisson(signal / G) + Normal(0, R^2): variance G * signal + R^2
   gaussian:sigma=S        DN = signal + Normal(0, S^2)
   none

Example:
   limpid simulate --psf gaussian:sigma=0.7 --noise poisson:gain=0.4,read=3 --quantize UInt16 truth.tif observed.tif`,
		Flags: []cli.Flag{
			&cli.StringFlag{Name: "psf", Usage: "PSF specification (as restore's --psf, e.g. gaussian:sigma=0.7 or kernel:psf.txt; not auto)"},
			&cli.StringFlag{Name: "noise", Usage: "noise model: poisson:gain=G,read=R | gaussian:sigma=S | none (required)"},
			&cli.StringFlag{Name: "quantize", Value: "same", Usage: "output data type: same (the input's), Byte, UInt16, Int16, UInt32, Int32, Float32"},
			&cli.Uint64Flag{Name: "seed", Value: 1, Usage: "random seed; the same seed gives the same output"},
			&cli.StringFlag{Name: "format", Value: "gtiff", Usage: "output container: gtiff or cog"},
		},
		Action: func(c *cli.Context) error { return simulateAction(c, stdin, stdout, stderr) },
	}
}

// simulateJob is a parsed simulate command line.
type simulateJob struct {
	in, out   string
	psfSpec   string // as given, trimmed
	noiseSpec string // as given
	kernel    *psf.Kernel
	noise     simulate.Noise
	format    gdal.Format
	dataType  string // "" for --quantize same
}

// parseSimulate reads simulate's arguments and flags, in the order their
// errors are reported.
func parseSimulate(c *cli.Context) (*simulateJob, error) {
	j := &simulateJob{in: c.Args().Get(0), out: c.Args().Get(1), noiseSpec: c.String("noise")}
	j.psfSpec = strings.TrimSpace(c.String("psf"))
	if j.psfSpec == "" {
		return nil, usagef("--psf is required, e.g. --psf gaussian:sigma=0.7")
	}
	if strings.HasPrefix(j.psfSpec, "auto") {
		return nil, usagef("--psf %q: simulate needs a PSF model or kernel; auto measures one from an observation", j.psfSpec)
	}
	var err error
	if j.kernel, err = psf.Parse(j.psfSpec, psfEnv()); err != nil {
		return nil, usageError{fmt.Errorf("--psf %w", err)}
	}
	if j.noiseSpec == "" {
		return nil, usagef("--noise is required, e.g. --noise poisson:gain=0.4,read=3, gaussian:sigma=5 or none")
	}
	if j.noise, err = simulate.ParseNoise(j.noiseSpec); err != nil {
		return nil, simulateFlagError(err, j.in, "")
	}
	j.format = gdal.Format(c.String("format"))
	if j.format != gdal.GTiff && j.format != gdal.COG {
		return nil, usagef("--format %q: use gtiff or cog", c.String("format"))
	}
	if j.dataType = c.String("quantize"); j.dataType == "same" {
		j.dataType = ""
	} else if err := simulate.CheckDataType(j.dataType); err != nil {
		return nil, simulateFlagError(err, j.in, j.dataType)
	}
	return j, nil
}

// simulateFlagError maps a *simulate.Error to the line that names the flag
// or argument behind its field (in: the INPUT argument, dataType: the
// output type).
func simulateFlagError(err error, in, dataType string) error {
	var se *simulate.Error
	if !errors.As(err, &se) {
		return err
	}
	switch se.Field {
	case "Noise":
		return fmt.Errorf("%w: --noise %q: %s", step.ErrConfig, se.Value, se.Reason)
	case "DataType":
		return usagef("--quantize %q: use same, Byte, UInt16, Int16, UInt32, Int32 or Float32", se.Value)
	case "NoData":
		return usagef("INPUT %s: its nodata value %s cannot be stored in --quantize %s", in, se.Value, dataType)
	}
	return err
}

func simulateAction(c *cli.Context, stdin io.Reader, stdout, stderr io.Writer) error {
	j, err := parseSimulate(c)
	if err != nil {
		return err
	}
	if err := checkPaths(j.in, j.out); err != nil {
		return err
	}
	ins := append([]namedPath{{"INPUT", j.in}}, psfInputs(j.psfSpec)...)
	if err := checkOutputs(stdout, stderr, ins, []namedPath{{"OUTPUT", j.out}}); err != nil {
		return err
	}
	inPath, done, err := spoolInput(j.in, stdin)
	if err != nil {
		return err
	}
	defer done()
	src, err := gdal.Open(inPath)
	if err != nil {
		return err
	}
	defer src.Close()
	meta := src.Meta()
	cfg := simulate.Config{H: conv.New(j.kernel), Noise: j.noise, Seed: c.Uint64("seed"), DataType: j.dataType}
	if err := cfg.Resolve(meta); err != nil {
		return simulateFlagError(err, j.in, cfg.DataType)
	}
	om := meta
	om.DataType = cfg.DataType
	om.Metadata = map[string]string{}
	for k, v := range meta.Metadata {
		om.Metadata[k] = v
	}
	wopts := gdal.WriteOptions{Format: j.format, DataType: cfg.DataType, NoData: cfg.OutNoData, HasNoData: cfg.HasOutNoData}
	if j.out == "-" {
		wopts.Stdout = stdout
	}
	dst, err := gdal.Create(j.out, om, wopts)
	if err != nil {
		return err
	}
	fmt.Fprintf(stderr, "limpid: simulating %dx%d, %d bands: PSF %s, noise %s, %s, seed %d\n",
		meta.Width, meta.Height, len(meta.Bands), j.psfSpec, j.noiseSpec, cfg.DataType, cfg.Seed)
	if err := simulate.Simulate(c.Context, src, dst, cfg); err != nil {
		dst.Abort()
		return err
	}
	for _, kv := range simulate.Metadata(j.psfSpec, j.noiseSpec, cfg.Seed) {
		if err := dst.SetMetadata(kv[0], kv[1]); err != nil {
			dst.Abort()
			return err
		}
	}
	return dst.Commit()
}
