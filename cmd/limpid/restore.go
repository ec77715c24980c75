package main

import (
	"context"
	"fmt"
	"io"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"time"

	"github.com/urfave/cli/v2"

	"limpid/psf"
	"limpid/raster"
	"limpid/raster/gdal"
	"limpid/raster/scratch"
	"limpid/step"
	"limpid/step/noise"
	"limpid/step/product"
)

func psfHelp() string {
	var b strings.Builder
	b.WriteString("PSF specification (required). Models:")
	for _, m := range psf.Models() {
		fmt.Fprintf(&b, "\n      %s: %s", m.Name, m.Summary)
		for _, p := range m.Params {
			fmt.Fprintf(&b, "\n        %s (%s): %s", p.Key, p.Unit, p.Doc)
		}
	}
	b.WriteString("\n      e.g. gaussian:sigma=0.7 | gaussian:sx=0.8,sy=0.6,angle=20 | kernel:psf.txt")
	b.WriteString(psfProductHelp)
	return b.String()
}

func restoreFlags() []cli.Flag {
	return append([]cli.Flag{
		&cli.StringSliceFlag{Name: "psf", Usage: psfHelp()},
		&cli.StringFlag{Name: "format", Value: "gtiff", Usage: "output container: gtiff (tiled, DEFLATE, predictor, BIGTIFF=IF_SAFER) or cog (Cloud Optimized GeoTIFF)"},
		&cli.StringFlag{Name: "bands", Usage: "1-based bands to restore, in output order, e.g. 1,3,4 (default: all)"},
		&cli.StringFlag{Name: "output-type", Value: "same", Usage: "same (round to nearest, clamp to the input type's range) or float32"},
		&cli.StringFlag{Name: "saturated", Usage: "pixels at or above this value are invalid: left out of the fit, written as nodata"},
		&cli.StringFlag{Name: "background", Value: "0", Usage: fmt.Sprintf("additive background b in DN, or auto (the %g percentile of each band's valid pixels)", step.BackgroundPercentile)},
		&cli.StringFlag{Name: "smooth", Value: defaultSmoothFlag, Usage: fmt.Sprintf("EMS smoothing bandwidth in pixels (0 = Richardson-Lucy), or auto: chosen per band among %v by a risk estimate", step.AutoSmooths)},
		&cli.StringFlag{Name: "stop", Value: string(defaultStopFlag), Usage: "when to stop: auto (minimum of the risk estimate), discrepancy (Morozov: residual at the estimated noise level), change (relative change below --tolerance)"},
		&cli.IntFlag{Name: "iterations", Value: step.DefaultIterations, Usage: "iteration cap per tile (a value given here is a hard cap)", DefaultText: fmt.Sprintf("%d with --stop change (the particle method's default stop), %d with discrepancy, %d with auto where runs whose risk still falls go on up to %d", step.DefaultIterations, step.AutoCap, step.AutoCap, step.AutoHardCap)},
		&cli.Float64Flag{Name: "tolerance", Value: step.DefaultTolerance, Usage: "--stop change: stop a tile when the relative L1 change falls below this (0 = never)"},
		&cli.StringFlag{Name: "choose", Value: string(step.ChooseGlobal), Usage: "with auto: global (one choice per band from windows of up to 16 tiles, 1 Mpixel per band at most; uniform look) or per-tile (every tile, 3x3 median-smoothed choice map)"},
		&cli.IntFlag{Name: "choice-pixels", Value: step.ChoiceBudget, Usage: "with auto and --choose global: at most this many pixels per band enter the risk estimate (centred windows of the sample tiles); 0 = the sample tiles whole (slower; measured in DEVELOPERS.md)"},
		&cli.StringFlag{Name: "noise", Value: "auto", Usage: "noise model var = a*DN + b used by auto and discrepancy: auto (fitted per band from the scene) or a=GAIN,b=READVAR"},
		&cli.StringFlag{Name: "method", Value: "grid", Usage: "solver: grid (EMS on the pixel grid) or particle (sequential Monte Carlo EMS with per-pixel error bars; see the particle flags)"},
		&cli.Uint64Flag{Name: "seed", Value: 1, Usage: "random seed for the particle method and for the probe of the automatic choice (recorded); same seed, same output"},
		&cli.IntFlag{Name: "workers", Value: 0, Usage: "parallel tile workers (0 = number of CPUs); output is identical for any value"},
		&cli.IntFlag{Name: "tile", Value: step.DefaultTile, Usage: "tile core size in pixels"},
		&cli.StringFlag{Name: "overlap", Value: "auto", Usage: "halo in pixels read around each tile; auto = 4 x (PSF radius + smoothing radius), rounded up to 8, at least 16, at most the tile"},
		&cli.StringFlag{Name: "report", Usage: "write a JSON report of the run to this file"},
	}, append(particleFlags(), viewFlags()...)...)
}

func restoreCommand(stdin io.Reader, stdout, stderr io.Writer) *cli.Command {
	return &cli.Command{
		Name:      "restore",
		Usage:     "restore a blurred raster (flags come before INPUT OUTPUT)",
		ArgsUsage: "INPUT OUTPUT",
		Description: `INPUT is any GDAL-readable raster (also /vsi... paths) or - for stdin.
OUTPUT is a path or - for stdout (the finished file is copied there; nothing else is).

Examples:
   limpid restore --psf gaussian:sigma=0.7 scene.tif scene_restored.tif
   limpid restore --psf gaussian:sx=0.8,sy=0.6,angle=20 --bands 1,3,4 --format cog in.tif out.tif
   gdal_translate -of GTiff in.jp2 /vsistdout/ | limpid restore --psf kernel:psf.txt - - > out.tif
   LIMPID_PSF=gaussian:sigma=0.6 LIMPID_WORKERS=2 limpid restore in.tif out.tif
   limpid restore --psf gaussian:sigma=0.7 --smooth 0.2 --stop change in.tif out.tif   (fixed, cheaper)
   limpid restore --psf gaussian:sigma=0.7 --psf 4=gaussian:sigma=0.9 in.tif out.tif   (band 4 its own PSF)
   LIMPID_PSF='1=gaussian:sigma=0.7;2=gaussian:sigma=0.8;3=gaussian:sigma=0.8;4=gaussian:sigma=0.9' limpid restore in.tif out.tif

By default the smoothing and the stop are chosen per band from the scene (noise
model + risk estimate; see the report's "choice"); --smooth EPS --stop change
gives the fixed behaviour.

Arrow IPC tile streams (README, "Arrow tile streams"; fixed settings, or a plan
packed with tiles pack --plan; README, "Scale out", also for --plan and --shard):
   limpid tiles pack scene.tif - | limpid restore --input-format arrow --output-format arrow --psf gaussian:sigma=0.7 --smooth 0.2 --stop change - - | limpid tiles unpack - out.tif

Every flag can also be set from LIMPID_<FLAG> (e.g. LIMPID_OUTPUT_TYPE=float32);
LIMPID_PSF takes a list of --psf values separated by ";".

` + caution,
		Flags:  append(append(restoreFlags(), streamFlags()...), planFlags()...),
		Action: func(c *cli.Context) error { return restoreAction(c, stdin, stdout, stderr) },
	}
}

// restoreJob is the parsed command line of restore.
type restoreJob struct {
	in, out    string
	format     gdal.Format
	outType    string
	bandSpec   string
	cfg        step.Config
	reportPath string
	// uncPath is --uncertainty: the error map (grid: noise error; particle:
	// total error).
	uncPath string
	// quicklookPath and htmlPath are --quicklook and --report-html
	// (views.go).
	quicklookPath, htmlPath string
}

func parseBands(s string, n int) ([]int, error) {
	if strings.TrimSpace(s) == "" {
		out := make([]int, n)
		for i := range out {
			out[i] = i
		}
		return out, nil
	}
	var out []int
	for _, f := range strings.Split(s, ",") {
		v, err := strconv.Atoi(strings.TrimSpace(f))
		if err != nil {
			return nil, usagef("--bands %q: %q is not a band number", s, f)
		}
		if v < 1 || v > n {
			return nil, usagef("--bands %q: band %d does not exist (the input has %d)", s, v, n)
		}
		out = append(out, v-1)
	}
	return out, nil
}

func parseJob(c *cli.Context) (*restoreJob, error) {
	j := &restoreJob{in: c.Args().Get(0), out: c.Args().Get(1), reportPath: c.String("report"), bandSpec: c.String("bands")}
	switch f := c.String("format"); f {
	case "gtiff", "cog":
		j.format = gdal.Format(f)
	default:
		return nil, usagef("--format %q: use gtiff or cog", f)
	}
	switch t := c.String("output-type"); t {
	case "same", "float32":
		j.outType = t
	default:
		return nil, usagef("--output-type %q: use same or float32", t)
	}
	if len(psfArgs(c)) == 0 {
		return nil, usagef("--psf is required, e.g. --psf gaussian:sigma=0.7")
	}
	// psfband.go: a PSF per band (BAND=SPEC, auto); else psf.go: one spec
	// or auto:band=N for every band.
	k, psfSpec, bandK, bandSpec, perBand, err := bandPSFs(c)
	if err == nil && !perBand {
		k, psfSpec, err = restorePSF(c)
	}
	if err != nil {
		return nil, err
	}
	cfg := step.Config{
		Method: step.Method(c.String("method")), PSF: k, PSFSpec: psfSpec,
		Tolerance: c.Float64("tolerance"), Tile: c.Int("tile"),
		Workers: c.Int("workers"), Seed: c.Uint64("seed"),
		Choose: step.Choose(c.String("choose")),
	}
	for _, bk := range bandK {
		if bk != nil {
			cfg.BandPSF, cfg.BandPSFSpec = bandK, bandSpec
		}
	}
	if err := parseRegularisation(c, &cfg); err != nil {
		return nil, err
	}
	switch v := c.Int("choice-pixels"); {
	case v < 0:
		return nil, usagef("--choice-pixels %d must be >= 0 (0: the sample tiles whole)", v)
	case v == 0:
		cfg.ChoiceBudget = -1
	default:
		cfg.ChoiceBudget = v
	}
	if c.Int("workers") < 0 {
		return nil, usagef("--workers %d must be >= 0", c.Int("workers"))
	}
	if c.Int("tile") < 16 {
		return nil, usagef("--tile %d must be at least 16", c.Int("tile"))
	}
	if o := c.String("overlap"); o != "auto" {
		v, err := strconv.Atoi(o)
		if err != nil || v < 0 {
			return nil, usagef("--overlap %q: give a number of pixels >= 0 or auto", o)
		}
		cfg.Overlap = v
		if v == 0 {
			cfg.Overlap = step.NoOverlap
		}
	}
	if err := parseLevels(c, &cfg); err != nil {
		return nil, err
	}
	if err := parseParticle(c, &cfg, j); err != nil {
		return nil, err
	}
	if err := parseViews(c, j); err != nil {
		return nil, err
	}
	if err := cfg.Resolve(); err != nil {
		return nil, err
	}
	j.cfg = cfg
	return j, nil
}

// parseLevels reads --background and --saturated.
func parseLevels(c *cli.Context, cfg *step.Config) error {
	switch b := c.String("background"); b {
	case "auto":
		cfg.BackgroundAuto = true
	default:
		v, err := strconv.ParseFloat(b, 64)
		if err != nil || math.IsNaN(v) || math.IsInf(v, 0) || v < 0 {
			return usagef("--background %q: give a value >= 0 in DN or auto", b)
		}
		cfg.Background = v
	}
	if s := c.String("saturated"); s != "" {
		v, err := strconv.ParseFloat(s, 64)
		if err != nil || math.IsNaN(v) {
			return usagef("--saturated %q is not a number", s)
		}
		cfg.Saturated, cfg.HasSaturated = v, true
	}
	return nil
}

// Defaults of --smooth and --stop (DEVELOPERS.md, "Automatic
// regularisation", has the measurement behind them).
const (
	defaultSmoothFlag = "auto"
	defaultStopFlag   = step.StopAuto
)

// parseRegularisation reads --smooth, --stop, --iterations and --noise.
func parseRegularisation(c *cli.Context, cfg *step.Config) error {
	switch sm := c.String("smooth"); sm {
	case "auto":
		cfg.SmoothAuto = true
		cfg.Smooth = step.DefaultSmooth
	default:
		v, err := strconv.ParseFloat(sm, 64)
		if err != nil || math.IsNaN(v) || v < 0 || v > 10 {
			return usagef("--smooth %q: give a bandwidth in pixels between 0 and 10, or auto", sm)
		}
		cfg.Smooth = v
	}
	// Without the flags, the method's stop rule and that rule's cap.
	cfg.Stop = step.DefaultStop(cfg.Method)
	if c.IsSet("stop") {
		cfg.Stop = step.Stop(c.String("stop"))
	}
	switch cfg.Stop {
	case step.StopAuto, step.StopDiscrepancy, step.StopChange:
	default:
		return usagef("--stop %q: use auto, discrepancy or change", cfg.Stop)
	}
	if c.IsSet("iterations") {
		cfg.Iterations = c.Int("iterations")
		if cfg.Iterations == 0 {
			return fmt.Errorf("%w: --iterations 0 must be between 1 and 100000", step.ErrConfig)
		}
	}
	if nz := c.String("noise"); nz != "auto" {
		m, err := parseNoise(nz)
		if err != nil {
			return err
		}
		cfg.Noise = m
	}
	return nil
}

// parseNoise reads "a=GAIN,b=READVAR".
func parseNoise(s string) (*noise.Model, error) {
	m := &noise.Model{Source: "given"}
	seen := map[string]bool{}
	for _, kv := range strings.Split(s, ",") {
		k, v, ok := strings.Cut(strings.TrimSpace(kv), "=")
		x, err := strconv.ParseFloat(v, 64)
		if !ok || err != nil || math.IsNaN(x) || math.IsInf(x, 0) || x < 0 || x > 1e30 {
			return nil, usagef("--noise %q: give auto or a=GAIN,b=READVAR with numbers between 0 and 1e30 (var = a*DN + b)", s)
		}
		if seen[k] {
			return nil, usagef("--noise %q: %s is given twice", s, k)
		}
		switch k {
		case "a":
			m.A = x
		case "b":
			m.B = x
		default:
			return nil, usagef("--noise %q: unknown key %q (use a and b)", s, k)
		}
		seen[k] = true
	}
	if !seen["a"] || !seen["b"] {
		return nil, usagef("--noise %q: give both a and b, e.g. a=0.4,b=9", s)
	}
	if m.A == 0 && m.B == 0 {
		return nil, usagef("--noise %q: a and b cannot both be 0", s)
	}
	return m, nil // Config.Resolve sets the floor
}

// checkPaths refuses OUTPUT == INPUT and a missing output directory before
// any work is done.
func checkPaths(in, out string) error {
	if out == "-" {
		return nil
	}
	if in != "-" {
		ai, _ := filepath.Abs(in)
		ao, _ := filepath.Abs(out)
		if ai == ao {
			return usagef("OUTPUT %s is the INPUT: write the restored scene to a new file and keep the original", out)
		}
		if si, err := os.Stat(in); err == nil {
			if so, err := os.Stat(out); err == nil && os.SameFile(si, so) {
				return usagef("OUTPUT %s is the INPUT: write the restored scene to a new file and keep the original", out)
			}
		}
	}
	dir := filepath.Dir(out)
	st, err := os.Stat(dir)
	if err != nil || !st.IsDir() {
		return usagef("OUTPUT %s: directory %s does not exist", out, dir)
	}
	if st, err := os.Stat(out); err == nil && st.IsDir() {
		return usagef("OUTPUT %s is a directory", out)
	}
	return nil
}

func restoreAction(c *cli.Context, stdin io.Reader, stdout, stderr io.Writer) error {
	if c.String("plan") != "" || c.String("shard") != "" {
		return planRestoreAction(c, stdin, stdout, stderr) // plan.go
	}
	// Every output path before any work (--psf auto measures INPUT in
	// parseJob).
	ins := []namedPath{{"INPUT", c.Args().Get(0)}}
	for _, v := range psfArgs(c) {
		if b, spec, ok := strings.Cut(v, "="); ok {
			if _, err := strconv.Atoi(strings.TrimSpace(b)); err == nil {
				v = strings.TrimSpace(spec)
			}
		}
		ins = append(ins, psfInputs(v)...)
	}
	outs := []namedPath{{"OUTPUT", c.Args().Get(1)}, {"--report", c.String("report")}, {"--uncertainty", c.String("uncertainty")},
		{"--quicklook", c.String("quicklook")}, {"--report-html", c.String("report-html")}}
	if err := checkOutputs(stdout, stderr, ins, outs); err != nil {
		return err
	}
	if c.String("input-format") == "arrow" && !c.IsSet("psf") {
		return runPlannedStream(c, stdin, stdout, stderr) // planstream.go: a stream that carries a plan
	}
	j, err := parseJob(c)
	if err != nil {
		return err
	}
	if err := checkPaths(j.in, j.out); err != nil {
		return err
	}
	if err := checkUncertaintyPath(j); err != nil {
		return err
	}
	// Tile streams on either side (tiles.go).
	for _, f := range []string{"input-format", "output-format"} {
		if v := c.String(f); v != "raster" && v != "arrow" {
			return usagef("--%s %q: use raster or arrow", f, v)
		}
	}
	if c.String("input-format") == "arrow" || c.String("output-format") == "arrow" {
		if j.cfg.BandPSF != nil {
			return usagef("--psf: a PSF per band is not available with tile streams (--input-format/--output-format arrow); restore the raster")
		}
		return runStreamRestore(c.Context, c, j, stdin, stdout, stderr)
	}
	_, err = runRestore(c.Context, j, stdin, stdout, stderr)
	return err
}

// fullReport is the JSON report: the job plus what the step did.
type fullReport struct {
	Input      string       `json:"input"`
	Output     string       `json:"output"`
	Format     string       `json:"format"`
	OutputType string       `json:"output_type"`
	DataType   string       `json:"input_data_type"`
	Finished   string       `json:"finished_utc"`
	Product    string       `json:"product"`
	Step       *step.Report `json:"restoration"`
	// Uncertainty is the --uncertainty raster (the error map).
	Uncertainty string `json:"uncertainty,omitempty"`
}

func runRestore(ctx context.Context, j *restoreJob, stdin io.Reader, stdout, stderr io.Writer) (*step.Report, error) {
	src, done, err := openRaster(j.in, stdin)
	if err != nil {
		return nil, err
	}
	defer done()
	defer src.Close()
	inPath := src.Path()
	meta := src.Meta()
	bands, err := parseBands(j.bandSpec, len(meta.Bands))
	if err != nil {
		return nil, err
	}
	om := product.Meta(meta, bands, j.outType == "float32")
	wopts := gdal.WriteOptions{Format: j.format, DataType: om.DataType}
	wopts.NoData, wopts.HasNoData = product.NoData(meta, bands, j.outType == "float32", j.cfg.HasSaturated)
	if j.out == "-" {
		wopts.Stdout = stdout
	}
	dst, err := gdal.Create(j.out, om, wopts)
	if err != nil {
		return nil, err
	}
	// The radiometric guard (radiometry.go): negative or huge values are
	// restored in exact changed units, stated and recorded.
	units, err := scanRadiometry(src, bands, j.cfg, inputName(j.in))
	if err != nil {
		dst.Abort()
		return nil, err
	}
	units.warn(stderr, inputName(j.in))
	cfg := units.config(j.cfg)
	prog := newRunProgress(stderr, expectedChoices(cfg), len(bands)*tileCount(meta, cfg))
	cfg.Watch = prog
	unc, err := createUncertainty(j, om)
	if err != nil {
		dst.Abort()
		return nil, err
	}
	if unc != nil {
		cfg.Uncertainty = unc
	}
	var engSrc raster.Reader = src
	var engDst raster.Writer = dst
	if units.active() {
		engSrc = newUnitsReader(src, units, j.cfg)
		engDst = &unitsWriter{Writer: dst, r: units, width: meta.Width}
		if unc != nil {
			cfg.Uncertainty = &unitsWriter{Writer: unc, r: radiometry{Scale: units.Scale}, width: meta.Width}
		}
	}
	rep, err := step.Restore(ctx, engSrc, bands, engDst, cfg)
	prog.Close()
	units.report(rep, j.cfg)
	if err == nil && units.active() {
		err = recordUnits(dst, units)
	}
	if err != nil {
		dst.Abort()
		if unc != nil {
			unc.Abort()
		}
		return nil, err
	}
	if err := commitRestore(ctx, j, meta, om, rep, dst, unc); err != nil {
		return nil, err
	}
	// The product is finished; quicklook and HTML page are made from it.
	if err := writeViews(j, inPath, bands, rep, stderr); err != nil {
		return rep, err
	}
	return rep, nil
}

// commitRestore labels the outputs, writes the JSON report and commits the
// standard-error raster and then OUTPUT; on failure nothing is left at
// their paths.
func commitRestore(ctx context.Context, j *restoreJob, meta, om raster.Meta, rep *step.Report, dst, unc *gdal.Writer) error {
	abort := func() {
		dst.Abort()
		if unc != nil {
			unc.Abort()
		}
	}
	if err := record(dst, product.Metadata(rep)); err != nil {
		abort()
		return err
	}
	if unc != nil {
		if err := record(unc, product.UncertaintyMetadata(rep)); err != nil {
			abort()
			return err
		}
	}
	if j.reportPath != "" {
		full := fullReport{Input: j.in, Output: j.out, Format: string(j.format), OutputType: om.DataType,
			DataType: meta.DataType, Finished: time.Now().UTC().Format(time.RFC3339), Product: product.Label, Step: rep,
			Uncertainty: j.uncPath}
		if err := writeJSON("--report", j.reportPath, full); err != nil {
			abort()
			return err
		}
	}
	if unc != nil {
		if err := unc.CommitContext(ctx); err != nil {
			dst.Abort()
			removeOutput(j.reportPath)
			return err
		}
	}
	if err := dst.CommitContext(ctx); err != nil {
		removeOutput(j.reportPath)
		if unc != nil {
			removeOutput(j.uncPath)
		}
		return err
	}
	return nil
}

// removeOutput takes back a file this run committed at path (nothing for
// "", stdout or a stream: a FIFO or device is never removed).
func removeOutput(path string) {
	if path == "" || path == "-" {
		return
	}
	if t, err := scratch.Inspect(path); err == nil && t.Kind == scratch.File {
		os.Remove(t.Path)
		scratch.Retract(t.Path)
	}
}

func tileCount(meta raster.Meta, cfg step.Config) int {
	p, err := step.NewPlan(meta.Width, meta.Height, cfg.Tile, cfg.Halo())
	if err != nil {
		return 0
	}
	return p.NTiles()
}

// record writes processing metadata items to a GDAL output.
func record(dst *gdal.Writer, rec product.Record) error {
	for _, it := range rec.Scene {
		if err := dst.SetMetadata(it.Key, it.Value); err != nil {
			return err
		}
	}
	for i, items := range rec.Bands {
		for _, it := range items {
			if err := dst.SetBandMetadata(i, it.Key, it.Value); err != nil {
				return err
			}
		}
	}
	return nil
}
