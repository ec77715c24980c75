package main

import (
	"encoding/json"
	"fmt"
	"io"
	"strings"

	"github.com/urfave/cli/v2"

	"limpid/arrowio"
	"limpid/raster"
	"limpid/raster/gdal"
	"limpid/step/plan"
	"limpid/step/stream"
)

// Tile streams with a scene plan (README, "Scale out"): tiles pack --plan
// writes the plan's JSON under the schema metadata key limpid.plan; restore
// --input-format arrow without --psf restores such a stream with the plan's
// settings and decisions (the automatic choice made on the whole scene),
// and the restored stream keeps the key, so that tiles unpack writes the
// raster route's report.

// packPlan reads tiles pack --plan for the scene meta: the plan's bands,
// tile size and halo, and its JSON; flags that contradict it are refused.
func packPlan(c *cli.Context, meta raster.Meta) (bands []int, tile, overlap int, text string, err error) {
	path := c.String("plan")
	p, err := readPlan("--plan", path)
	if err != nil {
		return nil, 0, 0, "", err
	}
	if err := p.Check(meta); err != nil {
		return nil, 0, 0, "", usagef("--plan %s: %s", path, strings.TrimPrefix(err.Error(), plan.ErrPlan.Error()+": "))
	}
	tile, overlap = p.Settings.Tile, max(p.Settings.Overlap, 0)
	if c.IsSet("tile") && c.Int("tile") != tile {
		return nil, 0, 0, "", usagef("--tile %d: the plan %s has tiles of %d", c.Int("tile"), path, tile)
	}
	if c.IsSet("overlap") && c.Int("overlap") != overlap {
		return nil, 0, 0, "", usagef("--overlap %d: the plan %s has a halo of %d", c.Int("overlap"), path, overlap)
	}
	if c.IsSet("bands") && c.String("bands") != bandList(p.Bands) {
		return nil, 0, 0, "", usagef("--bands %s: the plan %s restores bands %s", c.String("bands"), path, bandList(p.Bands))
	}
	b, err := json.Marshal(p)
	if err != nil {
		return nil, 0, 0, "", err
	}
	return p.Bands, tile, overlap, string(b), nil
}

// streamPlan parses and checks the plan a stream carries.
func streamPlan(in string, h *arrowio.Header) (*plan.File, error) {
	var p plan.File
	if err := json.Unmarshal([]byte(h.Plan), &p); err != nil {
		return nil, usagef("INPUT %s: metadata %s is not a plan: %v", in, arrowio.KeyPlan, err)
	}
	if err := p.Validate(); err != nil {
		return nil, usagef("INPUT %s: metadata %s: %s", in, arrowio.KeyPlan, strings.TrimPrefix(err.Error(), plan.ErrPlan.Error()+": "))
	}
	if p.Output.Width != h.Width || p.Output.Height != h.Height || len(p.Bands) != len(h.Bands) || len(p.Decided) != len(p.Bands) ||
		p.Settings.Tile != h.Tile || max(p.Settings.Overlap, 0) != h.Overlap || p.Settings.PSF == nil {
		return nil, usagef("INPUT %s: metadata %s: the plan (%dx%d, %d bands, tile %d) does not describe this stream (%dx%d, %d bands, tile %d)", in, arrowio.KeyPlan,
			p.Output.Width, p.Output.Height, len(p.Bands), p.Settings.Tile, h.Width, h.Height, len(h.Bands), h.Tile)
	}
	return &p, nil
}

// runPlannedStream restores a stream INPUT that carries a plan.
func runPlannedStream(c *cli.Context, stdin io.Reader, stdout, stderr io.Writer) error {
	if c.NArg() != 2 {
		return usagef("restore takes INPUT OUTPUT after the flags (got %d arguments)", c.NArg())
	}
	j := &restoreJob{in: c.Args().Get(0), out: c.Args().Get(1)}
	if err := checkPaths(j.in, j.out); err != nil {
		return err
	}
	switch f := c.String("format"); f {
	case "gtiff", "cog":
		j.format = gdal.Format(f)
	default:
		return usagef("--format %q: use gtiff or cog", f)
	}
	if c.String("report") != "" || c.String("quicklook") != "" || c.String("report-html") != "" {
		return usagef("--report, --quicklook and --report-html need raster input and output")
	}
	if c.Int("workers") < 0 {
		return usagef("--workers %d must be >= 0", c.Int("workers"))
	}
	r, closeIn, err := openStream(j.in, stdin)
	if err != nil {
		return err
	}
	defer closeIn()
	h := r.Header()
	if h.Plan == "" {
		return usagef("--psf is required, e.g. --psf gaussian:sigma=0.7 (the stream INPUT %s carries no plan: tiles pack --plan PLAN.json adds one)", j.in)
	}
	if h.Kind != arrowio.KindObserved {
		return usagef("INPUT %s: metadata %s is %q: restore needs an observed stream (limpid tiles pack)", j.in, arrowio.KeyKind, h.Kind)
	}
	p, err := streamPlan(j.in, h)
	if err != nil {
		return err
	}
	cfg := p.Config(c.Int("workers"))
	if cfg.BandPSF != nil {
		return usagef("INPUT %s: the stream's plan gives each band its own PSF, which tile streams do not carry; restore the raster with restore --plan", j.in)
	}
	cfg.SetTiling(h.Tile, h.Overlap)
	if err := cfg.Resolve(); err != nil {
		return err
	}
	j.cfg, j.outType = cfg, p.OutputType
	bgs := make([]float64, len(p.Decided))
	for i, d := range p.Decided {
		bgs[i] = d.Background
	}
	outHdr, err := stream.RestoredHeader(h, cfg, bgs)
	if err != nil {
		return err
	}
	in := &streamInput{cfg: cfg, hdr: h, src: r}
	tiles := 0
	in.cfg.Progress = func(done, _ int) { tiles = done }
	if c.String("output-format") == "arrow" {
		err = restoreToStream(c.Context, c, j, in, bgs, outHdr, stdout)
	} else {
		err = restoreToRaster(c.Context, j, in, bgs, outHdr, stdout)
	}
	if err != nil {
		return err
	}
	fmt.Fprintf(stderr, "limpid: restored %d tiles with the stream's plan\n", tiles)
	return nil
}
