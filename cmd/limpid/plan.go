package main

import (
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strconv"
	"strings"

	"github.com/urfave/cli/v2"

	"limpid/raster/gdal"
	"limpid/step"
	"limpid/step/plan"
	"limpid/step/product"
)

// Scene plans (README, "Scale out"): limpid plan decides once what needs
// the whole scene; restore --plan applies it, to the whole scene or to one
// shard's tiles (shard.go); limpid merge blends the shards (merge.go).

func planCommand(stdin io.Reader, stdout, stderr io.Writer) *cli.Command {
	return &cli.Command{
		Name:      "plan",
		Usage:     "decide once what a restore needs the whole scene for, and write it as a plan (flags come before INPUT PLAN.json)",
		ArgsUsage: "INPUT PLAN.json",
		Description: `Takes restore's flags. Runs the passes that need the whole scene (background,
noise model, the automatic smoothing and stop per band) and writes PLAN.json:
the settings, every band's decisions, the tiling and halo, the output type and
nodata, the random-stream key and a SHA-256 of the input's size,
georeferencing and bands. Apply it with restore --plan (the whole scene, the
default restore's bytes) or restore --plan --shard I/N (one shard's tiles,
then limpid merge).

Examples:
   limpid plan --psf gaussian:sigma=0.7 scene.tif scene.plan.json
   limpid restore --plan scene.plan.json scene.tif scene_restored.tif
   limpid restore --plan scene.plan.json --shard 0/2 scene.tif tiles/   (on one machine)
   limpid restore --plan scene.plan.json --shard 1/2 scene.tif tiles/   (on another; LIMPID_SHARD=1/2 works too)
   limpid merge tiles/ scene_merged.tif   (the same bytes as scene_restored.tif)
`,
		Flags:  restoreFlags(),
		Action: func(c *cli.Context) error { return planAction(c, stdin, stderr) },
	}
}

// planFlags are restore's flags for plans and shards.
func planFlags() []cli.Flag {
	return []cli.Flag{
		&cli.StringFlag{Name: "plan", Usage: "apply a plan from limpid plan: nothing is decided again (the other restore flags that it fixes are ignored)"},
		&cli.StringFlag{Name: "shard", Usage: "with --plan: restore only shard I of N (I/N, I from 0) into the directory OUTPUT, one file per tile; limpid merge joins them"},
	}
}

func planAction(c *cli.Context, stdin io.Reader, stderr io.Writer) error {
	j, err := parseJob(c)
	if err != nil {
		return err
	}
	if j.out == "-" {
		return usagef("PLAN.json -: give a file name")
	}
	if err := checkPaths(j.in, j.out); err != nil {
		return err
	}
	if j.cfg.Method == step.MethodParticle {
		return usagef("plan: --method particle is not planned (its standard-error map needs the whole run); plan the grid method")
	}
	src, done, err := openRaster(j.in, stdin)
	if err != nil {
		return err
	}
	defer done()
	defer src.Close()
	meta := src.Meta()
	bands, err := parseBands(j.bandSpec, len(meta.Bands))
	if err != nil {
		return err
	}
	f32 := j.outType == "float32"
	om := product.Meta(meta, bands, f32)
	nd, hasND := product.NoData(meta, bands, f32, j.cfg.HasSaturated)
	cfg := j.cfg
	prog := newRunProgress(stderr, expectedChoices(cfg), 0)
	cfg.Watch = prog
	rep, err := step.Decide(c.Context, src, bands, cfg)
	prog.Close()
	if err != nil {
		return err
	}
	cfg.Watch = nil
	p := plan.New(rep, cfg, meta, bands, j.outType, plan.OutputOf(om, meta.DataType, nd, hasND))
	valid := make([]step.ValidFunc, len(bands))
	for i, b := range bands {
		valid[i] = step.NewValid(meta.Bands[b].NoData, meta.Bands[b].HasNoData, cfg.Saturated, cfg.HasSaturated)
	}
	if err := p.Count(src, func(b int, v float32) bool { return valid[b](v) }); err != nil {
		return err
	}
	if err := writeJSON("PLAN.json", j.out, p); err != nil {
		return err
	}
	fmt.Fprintf(stderr, "limpid: plan %s written (%d tiles, %d bands, plan hash %s)\n", j.out, len(p.Tiles), len(bands), p.Hash())
	return nil
}

// readPlan reads a plan file; what names it in messages (--plan PATH).
func readPlan(what, path string) (*plan.File, error) {
	if st, err := os.Stat(path); err == nil && st.Size() > maxPlanBytes {
		return nil, usagef("%s %s: %d bytes is more than a plan's %d MiB: not a plan from limpid plan", what, path, st.Size(), maxPlanBytes>>20)
	}
	b, err := os.ReadFile(path)
	if err != nil {
		return nil, usagef("%s %s: %v", what, path, errors.Unwrap(err))
	}
	var p plan.File
	dec := json.NewDecoder(strings.NewReader(string(b)))
	if err := dec.Decode(&p); err != nil {
		return nil, usagef("%s %s: not a plan from limpid plan: %v", what, path, err)
	}
	if dec.More() {
		return nil, usagef("%s %s: not a plan from limpid plan: text after the JSON value", what, path)
	}
	if err := p.Validate(); err != nil {
		return nil, usagef("%s %s: %s", what, path, strings.TrimPrefix(err.Error(), plan.ErrPlan.Error()+": "))
	}
	return &p, nil
}

// maxPlanBytes bounds a plan file read whole (a plan of a 100000-pixel
// square scene in tiles of 512 with per-tile choices is about 10 MiB).
const maxPlanBytes = 256 << 20

// decidedFlags are restore flags whose values a plan fixes: the settings
// of restoreFlags, not the run's own (workers, container, report, views)
// nor the particle method's (never planned).
func decidedFlags() []string {
	run := map[string]bool{"workers": true, "format": true, "report": true}
	for _, f := range append(particleFlags(), viewFlags()...) {
		run[f.Names()[0]] = true
	}
	var out []string
	for _, f := range restoreFlags() {
		if n := f.Names()[0]; !run[n] {
			out = append(out, n)
		}
	}
	return out
}

// parseShard reads --shard I/N.
func parseShard(s string) (i, n int, err error) {
	a, b, ok := strings.Cut(s, "/")
	i, err1 := strconv.Atoi(strings.TrimSpace(a))
	n, err2 := strconv.Atoi(strings.TrimSpace(b))
	if !ok || err1 != nil || err2 != nil {
		return 0, 0, usagef("--shard %q: give I/N, shard I (from 0) of N, e.g. 0/8", s)
	}
	if n < 1 {
		return 0, 0, usagef("--shard %q: N must be at least 1", s)
	}
	if i < 0 || i >= n {
		return 0, 0, usagef("--shard %q: I must be between 0 and %d (shards count from 0)", s, n-1)
	}
	return i, n, nil
}

// planRestoreAction is restore --plan [--shard I/N].
func planRestoreAction(c *cli.Context, stdin io.Reader, stdout, stderr io.Writer) error {
	if c.String("plan") == "" {
		return usagef("--shard %s needs --plan PLAN.json (make one with limpid plan)", c.String("shard"))
	}
	if c.NArg() != 2 {
		return usagef("restore --plan takes INPUT OUTPUT (or INPUT DIR with --shard) after the flags (got %d arguments)", c.NArg())
	}
	in, out := c.Args().Get(0), c.Args().Get(1)
	si, sn := -1, 0
	if s := c.String("shard"); s != "" {
		var err error
		if si, sn, err = parseShard(s); err != nil {
			return err
		}
	}
	if in == "-" {
		return usagef("INPUT -: restore --plan reads INPUT twice (the check, the run); give a file")
	}
	if c.String("uncertainty") != "" {
		return usagef("--uncertainty %s: plans restore with the grid method, which has no Monte Carlo error", c.String("uncertainty"))
	}
	if c.String("input-format") != "raster" || c.String("output-format") != "raster" {
		return usagef("--plan: raster input and output only (a tile stream carries its plan: tiles pack --plan)")
	}
	p, err := readPlan("--plan", c.String("plan"))
	if err != nil {
		return err
	}
	var ignored []string
	for _, f := range decidedFlags() {
		if c.IsSet(f) {
			ignored = append(ignored, "--"+f)
		}
	}
	if len(ignored) > 0 {
		fmt.Fprintf(stderr, "limpid: --plan %s fixes %s: the values given are not used\n", c.String("plan"), strings.Join(ignored, ", "))
	}
	src, done, err := openRaster(in, stdin)
	if err != nil {
		return err
	}
	meta := src.Meta()
	src.Close()
	done()
	if err := p.Check(meta); err != nil {
		return usagef("--plan %s: %s (INPUT %s)", c.String("plan"), strings.TrimPrefix(err.Error(), plan.ErrPlan.Error()+": "), in)
	}
	if c.Int("workers") < 0 {
		return usagef("--workers %d must be >= 0", c.Int("workers"))
	}
	cfg := p.Config(c.Int("workers"))
	if err := cfg.Resolve(); err != nil {
		return fmt.Errorf("--plan %s: %w", c.String("plan"), err)
	}
	if si >= 0 {
		return runShard(c.Context, p, c.String("plan"), cfg, in, out, si, sn, stderr)
	}
	j := &restoreJob{in: in, out: out, outType: p.OutputType, cfg: cfg, reportPath: c.String("report"), bandSpec: bandList(p.Bands)}
	switch f := c.String("format"); f {
	case "gtiff", "cog":
		j.format = gdal.Format(f)
	default:
		return usagef("--format %q: use gtiff or cog", f)
	}
	if err := parseViews(c, j); err != nil {
		return err
	}
	if err := checkPaths(in, out); err != nil {
		return err
	}
	_, err = runRestore(c.Context, j, stdin, stdout, stderr)
	return err
}

// bandList is bands (0-based) as --bands text.
func bandList(bands []int) string {
	s := make([]string, len(bands))
	for i, b := range bands {
		s[i] = strconv.Itoa(b + 1)
	}
	return strings.Join(s, ",")
}

// writeUnique writes data to path atomically under a temporary name unique
// to this process (several shards may write the same file at once; the
// last rename wins, and every writer writes the same bytes).
func writeUnique(path string, data []byte) error {
	f, err := os.CreateTemp(filepath.Dir(path), "."+filepath.Base(path)+".*.tmp")
	if err != nil {
		return usagef("%s: cannot create: %v", path, errors.Unwrap(err))
	}
	_, err = f.Write(data)
	if cerr := f.Close(); err == nil {
		err = cerr
	}
	if err == nil {
		err = os.Chmod(f.Name(), 0o644)
	}
	if err == nil {
		err = os.Rename(f.Name(), path)
	}
	if err != nil {
		os.Remove(f.Name())
		return fmt.Errorf("writing %s: %w", path, err)
	}
	return nil
}
