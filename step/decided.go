package step

import (
	"context"
	"fmt"

	"limpid/raster"
	"limpid/step/noise"
)

const ( // Decision.Rule
	DecideNone        = "none"        // fixed smoothing, change stop: nothing to decide
	DecideFixed       = "fixed"       // no noise model: the given smoothing, change stop
	DecideDiscrepancy = "discrepancy" // the discrepancy stop, fixed smoothing
	DecideChosen      = "chosen"      // the risk estimate's choice
)

// TileSink, as Config.Tiles, restricts Restore to the tiles Need names and
// hands each tile's weighted output window to Put (in production order)
// instead of blending into dst: a shard of a plan (step/plan merges them).
type TileSink struct {
	Need func(col, row int) bool
	// Put receives band k.Band of tile (k.Col, k.Row): out holds the
	// blend-weighted window ox x oy, NaN where the input is invalid.
	Put func(k TileKey, ox, oy Span, out []float32, res Result) error
}

// Decide runs Restore's passes that need the whole scene (background, noise
// model, choice) and returns the report with Decided filled; nothing is
// restored.
func Decide(ctx context.Context, src raster.Reader, bands []int, cfg Config) (*Report, error) {
	return restore(ctx, src, bands, nil, cfg, true)
}

// DecidedSolver is the final-pass solver of cfg.Decided on tiling p (for
// tile streams, which restore tile by tile).
func (cfg *Config) DecidedSolver(p Plan) (Solver, error) {
	nb := len(cfg.Decided)
	return (&runner{cfg: *cfg, plan: p, bands: make([]int, nb), rep: &Report{Bands: make([]BandReport, nb)}}).replay()
}

// decide records band b's decision (the regulariser's noise model and the
// report's choice).
func (rg *regulariser) decide(b int, d Decision) {
	if rg.rep.Decided == nil {
		rg.rep.Decided = make([]Decision, len(rg.bands))
	}
	m := rg.noise[b]
	d.Noise, d.Choice = &m, rg.rep.Bands[b].Choice
	rg.rep.Decided[b] = d
}

// finishDecided completes Report.Decided: every band, with its background.
func (r *runner) finishDecided() {
	if len(r.rep.Decided) != len(r.bands) {
		r.rep.Decided = make([]Decision, len(r.bands))
	}
	for b := range r.rep.Decided {
		if r.rep.Decided[b].Rule == "" {
			r.rep.Decided[b].Rule = DecideNone
		}
		r.rep.Decided[b].Background = r.rep.Bands[b].Background
	}
}

// replay builds the final-pass solvers from Config.Decided the way
// regularise builds them from its passes.
func (r *runner) replay() (Solver, error) {
	nb := len(r.bands)
	rg := &regulariser{runner: r, noise: make([]noise.Model, nb), hs: r.cfg.operators(nb), bs: &bandSolver{byBand: make([]Solver, nb)},
		particle: r.cfg.Method == MethodParticle, cache: map[solverKey]Solver{}}
	if r.cfg.Choose == ChoosePerTile {
		rg.bs.byTile = make([]map[[2]int]Solver, nb)
	}
	for b, d := range r.cfg.Decided {
		if d.Noise != nil {
			rg.noise[b] = *d.Noise
			m := *d.Noise
			r.rep.Bands[b].Noise = &m
		}
		switch d.Rule {
		case DecideFixed:
			rg.fixed(b)
		case DecideDiscrepancy:
			rg.discrepancyBand(b)
		case DecideChosen:
			rg.bs.byBand[b] = rg.solverFor(b, d.Smooth, d.Iterations)
			if d.Kept {
				rg.bs.byBand[b] = &keptReplay{g: newGrid(rg.hs[b], d.Smooth, d.Iterations, 0), plan: r.plan, res: Result{Iterations: d.Iterations}}
			}
			if r.cfg.Choose == ChoosePerTile {
				rg.bs.byTile[b] = map[[2]int]Solver{}
				for _, tc := range d.Tiles {
					rg.bs.byTile[b][[2]int{tc.Col, tc.Row}] = rg.solverFor(b, tc.Smooth, tc.Iterations)
				}
			}
			if d.Choice != nil {
				ch := *d.Choice
				r.rep.Bands[b].Choice = &ch
			}
		default:
			return nil, fmt.Errorf("%w: decided band %d: rule %q", ErrConfig, b+1, d.Rule)
		}
	}
	// The noise error map propagates the decided models when every band
	// has one (else Restore estimates them).
	all := true
	for _, d := range r.cfg.Decided {
		all = all && d.Noise != nil
	}
	if all {
		r.noise = rg.noise
	}
	return rg.bs, nil
}

// keptReplay recomputes a kept iterate: the grid EMS on the tile without
// its halo (chooser.crop), stopped at the chosen iteration, placed in the
// tile's window.
type keptReplay struct {
	g    *GridEMS
	plan Plan
	res  Result
}

func (kr *keptReplay) Name() string { return "grid" }
func (kr *keptReplay) Solve(ctx context.Context, ws *Workspace, p *Problem, dst []float32) (Result, error) {
	if ws.auto == nil {
		ws.auto = &autoWork{}
	}
	cp := (&chooser{plan: kr.plan}).crop(ws.auto, p)
	// One tile per scene: this allocation happens once a band.
	kt := &keptTile{f: make([]float32, cp.W*cp.H), w: cp.W, h: cp.H, res: kr.res,
		x0: -kr.plan.InSpan(kr.plan.Cols, 0).Start, y0: -kr.plan.InSpan(kr.plan.Rows, 0).Start}
	if _, err := kr.g.Solve(ctx, ws, cp, kt.f); err != nil {
		return Result{}, err
	}
	return kt.Solve(ctx, ws, p, dst)
}

// put hands a shard's tile to the sink: its weighted window with NaN where
// the input is invalid (every tile covering an invalid pixel carries the
// NaN, so the merged sum is NaN there, as the single run writes).
func (sc *scan) put(j *rasterJob) error {
	W := sc.plan.W
	src := j.strip.Rows[j.key.Band]
	valid := sc.valid[j.key.Band]
	ow := j.ox.Len()
	for y := 0; y < j.oy.Len(); y++ {
		srow := src[(j.oy.Start+y-j.strip.Y)*W+j.ox.Start:]
		orow := j.out[y*ow : (y+1)*ow]
		for x := range orow {
			if !valid(srow[x]) {
				orow[x] = nan
			}
		}
	}
	return sc.sink.Put(j.key, j.ox, j.oy, j.out[:ow*j.oy.Len()], j.res)
}

func decidedBackground(d []Decision) []float64 {
	bg := make([]float64, len(d))
	for i := range d {
		bg[i] = d[i].Background
	}
	return bg
}
