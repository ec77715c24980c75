package main

import (
	"fmt"
	"io"
	"math"
	"strings"

	"github.com/urfave/cli/v2"

	"limpid/psf"
	"limpid/raster"
	"limpid/raster/gdal"
	"limpid/step"
	"limpid/step/conv"
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
			&cli.StringFlag{Name: "psf", EnvVars: env("psf"), Usage: "PSF specification (as restore's --psf, e.g. gaussian:sigma=0.7 or kernel:psf.txt; not auto)"},
			&cli.StringFlag{Name: "noise", EnvVars: env("noise"), Usage: "noise model: poisson:gain=G,read=R | gaussian:sigma=S | none (required)"},
			&cli.StringFlag{Name: "quantize", Value: "same", EnvVars: env("quantize"), Usage: "output data type: same (the input's), Byte, UInt16, Int16, UInt32, Int32, Float32"},
			&cli.Uint64Flag{Name: "seed", Value: 1, EnvVars: env("seed"), Usage: "random seed; the same seed gives the same output"},
			&cli.StringFlag{Name: "format", Value: "gtiff", EnvVars: env("format"), Usage: "output container: gtiff or cog"},
		},
		Action: func(c *cli.Context) error { return simulateAction(c, stdin, stdout, stderr) },
	}
}

func simulateAction(c *cli.Context, stdin io.Reader, stdout, stderr io.Writer) error {
	if c.NArg() != 2 {
		return usagef("simulate needs INPUT and OUTPUT after the flags (got %d arguments); flags after the arguments are not read", c.NArg())
	}
	in, out := c.Args().Get(0), c.Args().Get(1)
	spec := strings.TrimSpace(c.String("psf"))
	if spec == "" {
		return usagef("--psf is required, e.g. --psf gaussian:sigma=0.7")
	}
	if strings.HasPrefix(spec, "auto") {
		return usagef("--psf %q: simulate needs a PSF model or kernel; auto measures one from an observation", spec)
	}
	k, err := psf.Parse(spec, psfEnv())
	if err != nil {
		return usageError{fmt.Errorf("--psf %w", err)}
	}
	if c.String("noise") == "" {
		return usagef("--noise is required, e.g. --noise poisson:gain=0.4,read=3, gaussian:sigma=5 or none")
	}
	nz, err := step.ParseSimNoise(c.String("noise"))
	if err != nil {
		return err
	}
	format := gdal.Format(c.String("format"))
	if format != gdal.GTiff && format != gdal.COG {
		return usagef("--format %q: use gtiff or cog", c.String("format"))
	}
	q := c.String("quantize")
	switch q {
	case "same", "Byte", "UInt16", "Int16", "UInt32", "Int32", "Float32":
	default:
		return usagef("--quantize %q: use same, Byte, UInt16, Int16, UInt32, Int32 or Float32", q)
	}
	if err := checkPaths(in, out); err != nil {
		return err
	}
	inPath, done, err := spoolInput(in, stdin)
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
	if q == "same" {
		q = meta.DataType
		if q == "Float64" {
			q = "Float32"
		}
	}
	om := meta
	om.DataType = q
	om.Metadata = map[string]string{}
	for k, v := range meta.Metadata {
		om.Metadata[k] = v
	}
	// Input nodata (one value for all bands in a GeoTIFF).
	var inND float64
	var inHas bool
	for _, b := range meta.Bands {
		if b.HasNoData {
			inND, inHas = b.NoData, true
			break
		}
	}
	// Output nodata: the input's; else NaN for floats and the type's maximum
	// for integers, set only when invalid pixels can occur (float input).
	// A NaN nodata cannot be stored in an integer type: it becomes the
	// type's maximum.
	outND, outHas := inND, inHas
	_, _, inInt := raster.TypeRange(meta.DataType)
	lo, hi, outInt := raster.TypeRange(q)
	switch {
	case outHas && outInt && math.IsNaN(inND):
		outND = hi
	case outHas && outInt && (inND < lo || inND > hi || inND != math.Round(inND)):
		return usagef("INPUT %s: its nodata value %g cannot be stored in --quantize %s", in, inND, q)
	case !outHas && !inInt:
		outHas = true
		outND = math.NaN()
		if outInt {
			outND = hi
		}
	}
	wopts := gdal.WriteOptions{Format: format, DataType: q, NoData: outND, HasNoData: outHas}
	if out == "-" {
		wopts.Stdout = stdout
	}
	dst, err := gdal.Create(out, om, wopts)
	if err != nil {
		return err
	}
	cfg := step.SimConfig{H: conv.New(k), Noise: nz, Seed: c.Uint64("seed"), DataType: q,
		NoData: inND, HasNoData: inHas, OutNoData: outND, HasOutNoData: outHas}
	fmt.Fprintf(stderr, "limpid: simulating %dx%d, %d bands: PSF %s, noise %s, %s, seed %d\n",
		meta.Width, meta.Height, len(meta.Bands), spec, c.String("noise"), q, cfg.Seed)
	if err := step.Simulate(c.Context, src, dst, cfg); err != nil {
		dst.Abort()
		return err
	}
	for _, kv := range [][2]string{
		{"LIMPID_PRODUCT", "simulated observation (blurred, noise added); not a measurement"},
		{"LIMPID_VERSION", step.Version},
		{"LIMPID_SIMULATED_PSF", spec},
		{"LIMPID_SIMULATED_NOISE", c.String("noise")},
		{"LIMPID_SIMULATED_SEED", fmt.Sprint(cfg.Seed)},
	} {
		if err := dst.SetMetadata(kv[0], kv[1]); err != nil {
			dst.Abort()
			return err
		}
	}
	return dst.Commit()
}
