package step

import (
	"cmp"
	"context"
	"fmt"
	"math"
	"runtime/debug"
	"sort"
	"sync"

	"limpid/psf"
	"limpid/raster"
	"limpid/step/conv"
	"limpid/step/internal/level"
	"limpid/step/internal/sample"
	"limpid/step/noise"
	"limpid/step/watch"
)

// chooseMaxTiles bounds the tiles a global choice and the noise fit look
// at: an even 4 x 4 grid of the tile plan (all tiles of smaller scenes).
const chooseMaxTiles = 4

// ChoiceBudget is the default pixel budget of a global choice per band: the
// sample tiles' risk runs look at windows of at most this many pixels in
// all (Config.ChoiceBudget). Measured in DEVELOPERS.md, "Automatic
// regularisation" (the cost of the choice).
const ChoiceBudget = 1 << 20

// minChoiceWindow is the smallest side of a sample window: below it the
// window's mirrored edges (a PSF radius times the square root of the
// iterations) would weigh too much in the risk (common practice, no
// source; the budget keeps windows above it for up to 64 sample tiles).
const minChoiceWindow = 128

// noiseSamplesPerBand bounds the noise fit's memory (12 bytes a sample).
const noiseSamplesPerBand = 1 << 20

// sampleTiles returns which tiles of the plan the global passes use.
func sampleTiles(p Plan) map[[2]int]bool {
	m := map[[2]int]bool{}
	for _, r := range sample.Grid(len(p.Rows), chooseMaxTiles) {
		for _, c := range sample.Grid(len(p.Cols), chooseMaxTiles) {
			m[[2]int{c, r}] = true
		}
	}
	return m
}

// pass runs the tile loop over the whole scene with solver and discards the
// output (the noise and choice passes).
func (r *runner) pass(ctx context.Context, solver Solver, what string, tiles map[[2]int]bool) error {
	if w := r.cfg.Watch; w != nil { // tiles nil: every tile
		w.Start(watch.Pass{Kind: watch.Kind(solver.Name()), What: what, Tiles: len(r.bands) * cmp.Or(len(tiles), r.plan.NTiles())})
	}
	rep := *r.rep
	rep.Bands = append([]BandReport(nil), r.rep.Bands...)
	for i := range rep.Bands {
		rep.Bands[i].Tiles = nil
	}
	sub := &runner{cfg: r.cfg, plan: r.plan, src: r.src, dst: discard{}, bands: r.bands, valid: r.valid, rep: &rep, solver: solver,
		need: func(col, row int) bool { return tiles == nil || tiles[[2]int{col, row}] }}
	err := sub.run(ctx)
	// The pass's strip buffers are garbage now; hand them back before the
	// next pass allocates its own, so that passes do not stack up in the
	// peak RSS (measured on a 4096^2 scene: 383 MiB without, 263 with).
	debug.FreeOSMemory()
	return err
}

type discard struct{}

func (discard) WriteRows(int, int, [][]float32) error { return nil }
func (discard) Commit() error                         { return nil }
func (discard) Abort()                                {}

// noiseSolver samples the window each chosen tile owns (no halo).
type noiseSolver struct {
	plan    Plan
	tiles   map[[2]int]bool
	mu      sync.Mutex
	samples map[TileKey]*noise.Sampler
	limit   int
}

func (s *noiseSolver) Name() string { return "noise" }

func (s *noiseSolver) Solve(ctx context.Context, ws *Workspace, p *Problem, dst []float32) (Result, error) {
	for i := range dst[:p.W*p.H] {
		dst[i] = 0
	}
	k := p.Key
	if !s.tiles[[2]int{k.Col, k.Row}] {
		return Result{Flat: true}, nil
	}
	pl := s.plan
	ix, iy := pl.InSpan(pl.Cols, k.Col), pl.InSpan(pl.Rows, k.Row)
	cx, cy := pl.Cols[k.Col], pl.Rows[k.Row]
	valid := make([]bool, p.W*p.H)
	for i, m := range p.Mask[:p.W*p.H] {
		valid[i] = m != 0
	}
	// The tile's core, without the scene's outermost pixels: their 3x3
	// window would reach into the mirrored halo, where the residual has a
	// third of the variance (the estimate came out 0.72 of the truth on a
	// 64x64 scene before).
	x0, x1 := max(cx.Start, 1)-ix.Start, min(cx.End, pl.W-1)-ix.Start
	y0, y1 := max(cy.Start, 1)-iy.Start, min(cy.End, pl.H-1)-iy.Start
	ns := &noise.Sampler{Limit: s.limit}
	ns.Add(p.D, valid, p.W, p.H, x0, y0, x1, y1)
	s.mu.Lock()
	s.samples[k] = ns
	s.mu.Unlock()
	return Result{Flat: true}, nil
}

// estimateNoise fits one noise model per band from the sample tiles.
func (r *runner) estimateNoise(ctx context.Context) ([]noise.Model, error) {
	tiles := sampleTiles(r.plan)
	ns := &noiseSolver{plan: r.plan, tiles: tiles, samples: map[TileKey]*noise.Sampler{}, limit: max(1, noiseSamplesPerBand/len(tiles))}
	if err := r.pass(ctx, ns, "estimating the noise model", tiles); err != nil {
		return nil, err
	}
	out := make([]noise.Model, len(r.bands))
	for b := range r.bands {
		var keys []TileKey
		for k := range ns.samples {
			if k.Band == b {
				keys = append(keys, k)
			}
		}
		sortKeys(keys)
		all := &noise.Sampler{}
		for _, k := range keys {
			all.Merge(ns.samples[k])
		}
		m := all.Model()
		out[b] = m
	}
	return out, nil
}

func sortKeys(k []TileKey) {
	sort.Slice(k, func(i, j int) bool {
		a, b := k[i], k[j]
		if a.Band != b.Band {
			return a.Band < b.Band
		}
		if a.Row != b.Row {
			return a.Row < b.Row
		}
		return a.Col < b.Col
	})
}

// EstimateNoise fits the per-band noise model of a scene the way Restore
// does (sample tiles of the plan, invalid pixels excluded), for `limpid
// noise`. Only Tile, Overlap, Workers, Saturated of cfg are used.
func EstimateNoise(ctx context.Context, src raster.Reader, bands []int, cfg Config) ([]noise.Model, error) {
	if cfg.Tile == 0 {
		cfg.Tile = DefaultTile
	}
	if cfg.Overlap <= 0 {
		cfg.Overlap = 16
	}
	if cfg.Workers <= 0 {
		cfg.Workers = 1
	}
	meta := src.Meta()
	plan, err := NewPlan(meta.Width, meta.Height, cfg.Tile, cfg.Overlap)
	if err != nil {
		return nil, fmt.Errorf("%w: %v", ErrConfig, err)
	}
	r := &runner{cfg: cfg, plan: plan, src: src, bands: bands, rep: &Report{}}
	for _, b := range bands {
		if b < 0 || b >= len(meta.Bands) {
			return nil, fmt.Errorf("%w: band %d does not exist (input has %d)", ErrConfig, b+1, len(meta.Bands))
		}
		bi := meta.Bands[b]
		r.valid = append(r.valid, NewValid(bi.NoData, bi.HasNoData, cfg.Saturated, cfg.HasSaturated))
		r.rep.Bands = append(r.rep.Bands, BandReport{})
	}
	return r.estimateNoise(ctx)
}

// chooser runs the candidate bandwidths with the risk estimate on tiles.
type chooser struct {
	cfg     *Config
	plan    Plan
	tiles   map[[2]int]bool // nil: every tile
	noise   []noise.Model
	grids   [][]*GridEMS // per band, per candidate
	smooths []float64
	seed    uint64

	// keep: the scene is one tile, so the best candidate's best iterate
	// is the answer and no final pass is needed.
	keep bool
	// exhaustive: a global choice over several tiles. One pass per
	// candidate runs it on every sample tile; a band stops at the first
	// candidate whose summed risk rises (one tile's rise must not veto a
	// bandwidth the sum prefers). active is the pass's candidate.
	exhaustive bool
	// window is the largest side of a sample window of an exhaustive
	// choice (the pixel budget over the sample tiles, rounded down to a
	// 2,3,5-smooth size so that the risk's DCT is fast); 0: the whole
	// in-scene part of the tile.
	window   int
	active   int
	bandDone []bool
	kept     []*keptTile // per band

	mu      sync.Mutex
	weights map[weightsKey]*riskWeights
	noDCT   map[weightsKey]bool
	runs    map[TileKey][]riskRun
	valid   map[TileKey]int
}

func (c *chooser) Name() string { return "choose" }

func (c *chooser) riskWeights(k *psf.Kernel, w, h int) *riskWeights {
	c.mu.Lock()
	defer c.mu.Unlock()
	key := weightsKey{k, w, h}
	if rw, ok := c.weights[key]; ok || c.noDCT[key] {
		return rw
	}
	rw, ok := newRiskWeights(k, w, h)
	if !ok {
		c.noDCT[key] = true
		return nil
	}
	c.weights[key] = rw
	return rw
}

// Solve runs the risk estimate on one tile: one candidate per pass
// (exhaustive), or every candidate until the risk rises (per tile, or a
// one-tile scene). It records the runs; the output stays zero.
func (c *chooser) Solve(ctx context.Context, ws *Workspace, p *Problem, dst []float32) (Result, error) {
	n := p.W * p.H
	for i := range dst[:n] {
		dst[i] = 0
	}
	k := p.Key
	if c.tiles != nil && !c.tiles[[2]int{k.Col, k.Row}] {
		return Result{Flat: true}, nil
	}
	if nm := c.noise[k.Band]; nm.A+nm.B <= 0 {
		return Result{Flat: true}, nil
	}
	if ws.auto == nil {
		ws.auto = &autoWork{}
	}
	cp := c.crop(ws.auto, p)
	rp := setupRisk(ws.auto, cp, &c.noise[k.Band], c.riskWeights(c.cfg.Kernel(k.Band), cp.W, cp.H), c.seed, NoiseInflation)
	if rp.nValid == 0 || !(rp.flux > 0) {
		return Result{Flat: true}, nil
	}
	var err error
	if c.exhaustive {
		err = c.solveActive(ctx, ws, k, rp)
	} else {
		err = c.solveAll(ctx, ws, k, cp, rp)
	}
	if err != nil {
		return Result{}, err
	}
	return Result{Flat: true}, nil
}

// newRuns is a tile's run list before any candidate ran.
func (c *chooser) newRuns() []riskRun {
	runs := make([]riskRun, len(c.smooths))
	for i := range runs {
		runs[i] = riskRun{Smooth: c.smooths[i], BestR: math.Inf(1), Mode: RiskSkipped}
	}
	return runs
}

// judge completes a candidate's run: with a fixed stop the candidate is
// judged at the cap.
func (c *chooser) judge(run *riskRun, i int) {
	if c.cfg.Stop != StopAuto {
		run.BestK, run.BestR = c.cfg.Iterations, run.Risk[len(run.Risk)-1]
	}
	run.Smooth = c.smooths[i]
}

// solveActive runs the pass's one candidate (regularise decides which, and
// when a band's summed risk has risen).
func (c *chooser) solveActive(ctx context.Context, ws *Workspace, k TileKey, rp *riskProblem) error {
	i := c.active
	c.mu.Lock()
	done := c.bandDone[k.Band]
	c.mu.Unlock()
	if done {
		return nil
	}
	run, err := runRisk(ctx, ws, ws.auto, rp, c.grids[k.Band][i], c.limit(), c.cfg.Stop == StopAuto, false, math.Inf(1))
	if err != nil {
		return err
	}
	c.judge(&run, i)
	c.mu.Lock()
	if c.runs[k] == nil {
		c.runs[k] = c.newRuns()
	}
	c.runs[k][i] = run
	c.valid[k] = rp.nValid
	c.mu.Unlock()
	return nil
}

// solveAll runs the candidates from the least to the most smoothing until
// the risk rises, keeping the best iterate of a one-tile scene.
func (c *chooser) solveAll(ctx context.Context, ws *Workspace, k TileKey, cp *Problem, rp *riskProblem) error {
	auto := c.cfg.Stop == StopAuto
	runs := c.newRuns()
	beat := math.Inf(1)
	var kept []float32
	for i, g := range c.grids[k.Band] {
		run, err := runRisk(ctx, ws, ws.auto, rp, g, c.limit(), auto, c.keep, beat)
		if err != nil {
			return err
		}
		if run.BestR < beat {
			beat = run.BestR
			if c.keep {
				kept = append(kept[:0], ws.auto.best[:cp.W*cp.H]...)
			}
		}
		c.judge(&run, i)
		runs[i] = run
		// The risk has been unimodal in the bandwidth on every scene
		// measured (DEVELOPERS.md, automatic regularisation), so the
		// first rise ends the search.
		if i > 0 && run.BestR > runs[i-1].BestR {
			break
		}
	}
	c.mu.Lock()
	c.runs[k] = runs
	c.valid[k] = rp.nValid
	if c.keep && auto {
		c.kept[k.Band] = &keptTile{f: kept, w: cp.W, h: cp.H}
	}
	c.mu.Unlock()
	return nil
}

// crop returns the part of the tile inside the scene. A halo mirrored at
// the scene border repeats the same pixels and noise: the risk estimate
// over such a tile weighs the border strips several times and, measured on
// smooth relief, chose 8 iterations where the interior's optimum was 3.
// The choice therefore sees each scene pixel once; the final pass restores
// the full tile with the chosen settings. An exhaustive choice then keeps
// a centred window of at most c.window pixels a side (the pixel budget).
func (c *chooser) crop(aw *autoWork, p *Problem) *Problem {
	k := p.Key
	ix, iy := c.plan.InSpan(c.plan.Cols, k.Col), c.plan.InSpan(c.plan.Rows, k.Row)
	x0, y0 := max(0, -ix.Start), max(0, -iy.Start)
	x1, y1 := min(p.W, c.plan.W-ix.Start), min(p.H, c.plan.H-iy.Start)
	if c.exhaustive {
		x0, x1 = sample.Window(x0, x1, c.window)
		y0, y1 = sample.Window(y0, y1, c.window)
	}
	if x0 == 0 && y0 == 0 && x1 == p.W && y1 == p.H {
		return p
	}
	cw, chh := x1-x0, y1-y0
	aw.cropD, aw.cropM = grow(aw.cropD, cw*chh), grow(aw.cropM, cw*chh)
	for y := 0; y < chh; y++ {
		copy(aw.cropD[y*cw:(y+1)*cw], p.D[(y0+y)*p.W+x0:])
		copy(aw.cropM[y*cw:(y+1)*cw], p.Mask[(y0+y)*p.W+x0:])
	}
	return &Problem{D: aw.cropD, Mask: aw.cropM, W: cw, H: chh, Background: p.Background, Key: k}
}

// limit is the runs' iteration limit: the cap, or the soft cap's hard limit
// (runs end by patience, so the extension costs only where the risk falls).
func (c *chooser) limit() int {
	if c.cfg.Stop == StopAuto && c.cfg.IterationLimit > c.cfg.Iterations {
		return c.cfg.IterationLimit
	}
	return c.cfg.Iterations
}

// summarise turns one band's tile runs into its Choice.
func (c *chooser) summarise(band int) Choice {
	var keys []TileKey
	for k := range c.runs {
		if k.Band == band {
			keys = append(keys, k)
		}
	}
	sortKeys(keys)
	ch := Choice{TilesUsed: len(keys)}
	if c.cfg.Stop == StopAuto {
		ch.Rule = fmt.Sprintf("risk minimum (stop %d iterations after it, cap %d)", RiskPatience, c.cfg.Iterations)
		if lim := c.limit(); lim > c.cfg.Iterations {
			ch.Rule = fmt.Sprintf("risk minimum (stop %d iterations after it, cap %d, extended up to %d while the risk falls)", RiskPatience, c.cfg.Iterations, lim)
		}
	} else {
		ch.Rule = fmt.Sprintf("risk at the cap %d (the final pass stops by --stop %s)", c.cfg.Iterations, c.cfg.Stop)
	}
	if len(keys) == 0 {
		ch.Smooth, ch.Iterations = c.cfg.Smooth, c.cfg.Iterations
		ch.Rule = "no tile with signal: the given smoothing and cap"
		return ch
	}
	// The two risk estimates weight errors differently (Q^2 against H^T H):
	// not summed together, tiles on the DCT estimate decide when any.
	var dctKeys []TileKey
	for _, k := range keys {
		if c.runs[k][0].Mode == RiskPrediction {
			ch.PredictionTiles++
		} else {
			dctKeys = append(dctKeys, k)
		}
	}
	if len(dctKeys) > 0 {
		keys = dctKeys
	}
	ch.TilesUsed = len(keys)
	for _, k := range keys {
		ch.PixelsUsed += c.valid[k]
	}
	best := -1
	for i, s := range c.smooths {
		cr := c.candidate(i, s, keys)
		ch.Candidates = append(ch.Candidates, cr)
		if !cr.Skipped && (best < 0 || cr.Risk < ch.Candidates[best].Risk) {
			best = i
		}
	}
	if best < 0 {
		ch.Smooth, ch.Iterations = c.cfg.Smooth, min(c.cfg.Iterations, DefaultIterations)
		ch.Rule = "fallback: no finite risk (check --noise); the given smoothing and cap"
		return ch
	}
	ch.Smooth = ch.Candidates[best].Smooth
	ch.Iterations = max(1, ch.Candidates[best].BestIterations)
	ch.StopFrom, ch.CapBound = ch.Candidates[best].StopFrom, ch.Candidates[best].CapBound
	if ch.CapBound && c.cfg.Stop == StopAuto {
		ch.Rule += fmt.Sprintf("; the risk still fell at the limit %d: the stop is bound by it", c.limit())
	}
	return ch
}

// candidate summarises bandwidth i (s) over the tiles keys: risk, stop, cap.
func (c *chooser) candidate(i int, s float64, keys []TileKey) CandidateReport {
	cr := CandidateReport{Smooth: s}
	var ks []weighted
	minLen := math.MaxInt
	for _, k := range keys {
		run := c.runs[k][i]
		cr.Risk += run.BestR
		ks = append(ks, weighted{V: float64(run.BestK), W: float64(c.valid[k])})
		minLen = min(minLen, len(run.Risk))
	}
	if math.IsInf(cr.Risk, 0) || math.IsNaN(cr.Risk) {
		// Skipped on some tile (its risk rose at a smaller
		// bandwidth): not a candidate for the band.
		cr.Skipped, cr.Risk, cr.BestIterations = true, 0, 0
		return cr
	}
	cr.BestIterations, cr.StopFrom = int(level.WeightedMedian(ks)), StopFromMedian
	allFull := true
	for _, k := range keys {
		allFull = allFull && len(c.runs[k][i].Risk) == c.limit()
	}
	bestSum, bestIt := math.Inf(1), 0
	for it := 1; it <= minLen; it++ {
		var sum float64
		for _, k := range keys {
			sum += c.runs[k][i].Risk[it-1]
		}
		if !math.IsNaN(sum) && !math.IsInf(sum, 0) {
			cr.Curve = append(cr.Curve, [2]float64{float64(it), sum})
			if sum < bestSum {
				bestSum, bestIt = sum, it
			}
		}
	}
	// The summed curve decides where every tile's run covers its
	// minimum and RiskPatience iterations beyond (or ran to the limit):
	// one stop for the band, the minimum of the band's total risk.
	if bestIt > 0 && (bestIt+RiskPatience <= minLen || allFull) {
		cr.BestIterations, cr.StopFrom = bestIt, StopFromSummed
	}
	for _, k := range keys {
		run := c.runs[k][i]
		if len(run.Risk) == c.limit() && run.BestK == c.limit() {
			cr.CapBound = true
		}
	}
	return cr
}

type weighted = level.Weighted

// tileMap returns the per-tile choices of a band, smoothed by a 3 x 3
// median over the tile grid (bandwidth and log iterations separately), so
// that neighbouring tiles do not jump between very different settings.
func (c *chooser) tileMap(band int, fallback Choice) map[[2]int]TileChoice {
	nc, nr := len(c.plan.Cols), len(c.plan.Rows)
	raw := map[[2]int]TileChoice{}
	for k, runs := range c.runs {
		if k.Band != band {
			continue
		}
		bi := 0
		for i := range runs {
			if runs[i].BestR < runs[bi].BestR {
				bi = i
			}
		}
		raw[[2]int{k.Col, k.Row}] = TileChoice{Col: k.Col, Row: k.Row, Smooth: runs[bi].Smooth, Iterations: max(1, runs[bi].BestK)}
	}
	return level.SmoothTileMap(raw, nc, nr, fallback.Smooth, fallback.Iterations)
}

// newGrid builds a plain GridEMS for (eps, k).
// newGrid is a GridEMS with PSF operator H, smoothing bandwidth eps,
// iteration cap iters and change tolerance tol.
func newGrid(H *conv.Operator, eps float64, iters int, tol float64) *GridEMS {
	g := &GridEMS{H: H, Smooth: eps, Iterations: iters, Tolerance: tol}
	if sk := conv.SmoothingKernel(eps); sk != nil {
		g.S = conv.NewSeparable(sk, sk)
	}
	return g
}

// bandSolver dispatches tiles to a solver per band, or per tile.
type bandSolver struct {
	byBand []Solver
	byTile []map[[2]int]Solver // per band; nil: use byBand
}

func (b *bandSolver) Name() string { return b.byBand[0].Name() }

func (b *bandSolver) Solve(ctx context.Context, ws *Workspace, p *Problem, dst []float32) (Result, error) {
	k := p.Key
	if b.byTile != nil && b.byTile[k.Band] != nil {
		if s, ok := b.byTile[k.Band][[2]int{k.Col, k.Row}]; ok {
			return s.Solve(ctx, ws, p, dst)
		}
	}
	return b.byBand[k.Band].Solve(ctx, ws, p, dst)
}

// regularise estimates the noise where needed and chooses the smoothing and
// stop per band; it returns the solver for the final pass. Its steps: the
// noise models (bandNoise), then either the discrepancy solvers (a fixed
// bandwidth) or the choice passes over the sample tiles (choosePasses) and
// the chosen solvers (chosen).
func (r *runner) regularise(ctx context.Context) (Solver, error) {
	if r.cfg.Decided != nil {
		return r.replay()
	}
	models, err := r.bandNoise(ctx)
	if err != nil {
		return nil, err
	}
	rg := &regulariser{runner: r, noise: models, hs: r.cfg.operators(len(r.bands)), bs: &bandSolver{byBand: make([]Solver, len(r.bands))},
		particle: r.cfg.Method == MethodParticle, cache: map[solverKey]Solver{}}
	if !r.cfg.SmoothAuto && r.cfg.Stop != StopAuto {
		return rg.discrepancy(), nil
	}
	c := rg.newChooser()
	if err := rg.choosePasses(ctx, c); err != nil {
		return nil, err
	}
	return rg.chosen(c), nil
}

// bandNoise is the noise model of every band: the given one, or estimated
// from the scene; the report records it.
func (r *runner) bandNoise(ctx context.Context) ([]noise.Model, error) {
	models := make([]noise.Model, len(r.bands))
	if r.cfg.Noise != nil {
		for i := range models {
			models[i] = *r.cfg.Noise
			models[i].Source = "given"
		}
	} else {
		var err error
		if models, err = r.estimateNoise(ctx); err != nil {
			return nil, err
		}
	}
	for i := range models {
		m := models[i]
		r.rep.Bands[i].Noise = &m
	}
	r.noise = models
	return models, nil
}

// regulariser is regularise's state: the bands' noise models and the
// solvers it builds.
type regulariser struct {
	*runner
	noise    []noise.Model
	hs       []*conv.Operator // per band
	bs       *bandSolver
	particle bool
	cache    map[solverKey]Solver
}

type solverKey struct {
	h   *conv.Operator
	eps float64
	k   int
}

type weightsKey struct {
	k    *psf.Kernel
	w, h int
}

func (rg *regulariser) usable(b int) bool { return rg.noise[b].A+rg.noise[b].B > 0 }

// fixed gives band b the fixed fallback (no noise model): the given
// smoothing, and the method's own stop (the grid method by change, the
// particle method its fixed iterations: it stays the particle method).
func (rg *regulariser) fixed(b int) {
	cfg := &rg.cfg
	if rg.particle {
		rg.bs.byBand[b] = rg.solverFor(b, cfg.Smooth, cfg.Iterations)
		rg.rep.Bands[b].Choice = &Choice{Smooth: cfg.Smooth, Iterations: cfg.Iterations,
			Rule: fmt.Sprintf("fallback: no noise model (%s); the given smoothing, the particle method's --iterations", rg.noise[b].Source)}
		return
	}
	rg.bs.byBand[b] = newGrid(rg.hs[b], cfg.Smooth, min(cfg.Iterations, DefaultIterations), DefaultTolerance)
	rg.rep.Bands[b].Choice = &Choice{Smooth: cfg.Smooth, Iterations: min(cfg.Iterations, DefaultIterations),
		Rule: fmt.Sprintf("fallback: no noise model (%s); the given smoothing, stop by change %g", rg.noise[b].Source, DefaultTolerance)}
	rg.decide(b, Decision{Rule: DecideFixed})
}

// discrepancy: the discrepancy stop with a fixed bandwidth.
func (rg *regulariser) discrepancy() Solver {
	for b := range rg.bs.byBand {
		if !rg.usable(b) {
			rg.fixed(b)
			continue
		}
		rg.discrepancyBand(b)
	}
	return rg.bs
}

// discrepancyBand gives band b the discrepancy stop with the fixed bandwidth.
func (rg *regulariser) discrepancyBand(b int) {
	cfg := &rg.cfg
	g := newGrid(rg.hs[b], cfg.Smooth, cfg.Iterations, 0)
	g.Noise, g.Tau = &rg.noise[b], DiscrepancyTau
	rg.bs.byBand[b] = g
	rg.rep.Bands[b].Choice = &Choice{Smooth: cfg.Smooth, Iterations: cfg.Iterations,
		Rule: fmt.Sprintf("discrepancy: per tile, the first iterate with residual <= %.2f^2 x summed noise variance (cap %d; tiles report their iterations)", DiscrepancyTau, cfg.Iterations)}
	rg.decide(b, Decision{Rule: DecideDiscrepancy})
}

// newChooser sets up the choice over the candidate bandwidths.
func (rg *regulariser) newChooser() *chooser {
	cfg := &rg.cfg
	nb := len(rg.bands)
	smooths := []float64{cfg.Smooth}
	if cfg.SmoothAuto {
		smooths = AutoSmooths
	}
	ccfg := cfg
	if rg.particle {
		// The particle method's output is a Monte Carlo average whose
		// derivative along a probe is not defined pathwise (resampling is
		// discontinuous), so the risk is not computed on it. It
		// approximates the same EMS recursion, so the bandwidth the grid
		// EMS risk chooses is the one it gets; it keeps its own
		// iterations (burn-in and averaging window).
		cc := *cfg
		cc.Stop, cc.Iterations = StopAuto, AutoCap
		ccfg = &cc
	}
	c := &chooser{cfg: ccfg, plan: rg.plan, noise: rg.noise, smooths: smooths, seed: cfg.Seed,
		weights: map[weightsKey]*riskWeights{}, noDCT: map[weightsKey]bool{}, runs: map[TileKey][]riskRun{}, valid: map[TileKey]int{}}
	if cfg.Choose != ChoosePerTile {
		c.tiles = sampleTiles(rg.plan)
		c.exhaustive = len(c.tiles) > 1
		if c.exhaustive {
			budget := cfg.ChoiceBudget
			if budget == 0 {
				budget = ChoiceBudget
			}
			c.window = sample.Side(budget, len(c.tiles), minChoiceWindow)
		}
	}
	// The kept iterate has no noise map: with one, the final pass runs.
	c.keep = rg.plan.NTiles() == 1 && cfg.Stop == StopAuto && !rg.particle && cfg.Uncertainty == nil
	c.kept = make([]*keptTile, nb)
	by := map[*conv.Operator][]*GridEMS{}
	for _, h := range rg.hs {
		if by[h] == nil {
			for _, e := range smooths {
				by[h] = append(by[h], newGrid(h, e, ccfg.Iterations, 0))
			}
		}
		c.grids = append(c.grids, by[h])
	}
	return c
}

// choosePasses runs the choice: one pass per candidate bandwidth over the
// sample tiles, a band dropping out at the first rise of its summed risk;
// or, per tile, one pass over the scene with every candidate.
func (rg *regulariser) choosePasses(ctx context.Context, c *chooser) error {
	if !c.exhaustive {
		return rg.pass(ctx, c, fmt.Sprintf("choosing smoothing and stop (%d candidate bandwidths, %s)", len(c.smooths), rg.cfg.Choose), c.tiles)
	}
	nb := len(rg.bands)
	c.bandDone = make([]bool, nb)
	prev := make([]float64, nb)
	for i := range c.smooths {
		c.active = i
		if err := rg.pass(ctx, c, fmt.Sprintf("choosing smoothing and stop: bandwidth %g on %d sample tiles", c.smooths[i], len(c.tiles)), c.tiles); err != nil {
			return err
		}
		all := true
		for b := 0; b < nb; b++ {
			if c.bandDone[b] {
				continue
			}
			sum := c.summedRisk(b, i)
			if i > 0 && !(sum <= prev[b]) {
				c.bandDone[b] = true
			}
			prev[b] = sum
			all = all && c.bandDone[b]
		}
		if all {
			break
		}
	}
	return nil
}

// summedRisk is band b's best risk at candidate i summed over its tiles in
// (row, column) order.
func (c *chooser) summedRisk(b, i int) float64 {
	var keys []TileKey
	for k := range c.runs {
		if k.Band == b {
			keys = append(keys, k)
		}
	}
	sortKeys(keys)
	var sum float64
	for _, k := range keys {
		sum += c.runs[k][i].BestR
	}
	return sum
}

// solverFor is the (cached) final-pass solver for bandwidth eps stopped at
// k iterations.
func (rg *regulariser) solverFor(b int, eps float64, k int) Solver {
	cfg := &rg.cfg
	key := solverKey{rg.hs[b], eps, k}
	if s, ok := rg.cache[key]; ok {
		return s
	}
	it := k
	if cfg.Stop != StopAuto {
		it = cfg.Iterations
	}
	tol := 0.0
	if cfg.Stop == StopChange {
		tol = cfg.Tolerance
	}
	var s Solver
	if rg.particle {
		pc := *cfg
		pc.Smooth, pc.PSF = eps, cfg.Kernel(b)
		s = pc.newParticleSolver()
	} else {
		s = newGrid(rg.hs[b], eps, it, tol)
	}
	rg.cache[key] = s
	return s
}

// chosen builds every band's final-pass solver from the choice and records
// the choice in the report.
func (rg *regulariser) chosen(c *chooser) Solver {
	cfg := &rg.cfg
	nb := len(rg.bands)
	if cfg.Choose == ChoosePerTile {
		rg.bs.byTile = make([]map[[2]int]Solver, nb)
	}
	for b := 0; b < nb; b++ {
		if !rg.usable(b) {
			rg.fixed(b)
			continue
		}
		ch := c.summarise(b)
		d := Decision{Rule: DecideChosen, Smooth: ch.Smooth, Iterations: ch.Iterations, Kept: c.kept[b] != nil && cfg.Choose != ChoosePerTile}
		rg.bs.byBand[b] = rg.solverFor(b, ch.Smooth, ch.Iterations)
		if kt := c.kept[b]; kt != nil && cfg.Choose != ChoosePerTile {
			kt.res, kt.smooth = Result{Iterations: ch.Iterations}, ch.Smooth
			kt.x0, kt.y0 = -rg.plan.InSpan(rg.plan.Cols, 0).Start, -rg.plan.InSpan(rg.plan.Rows, 0).Start
			rg.bs.byBand[b] = kt
		}
		if cfg.Choose == ChoosePerTile {
			rg.perTile(c, b, &ch)
		}
		if cfg.Stop != StopAuto {
			ch.Iterations = cfg.Iterations
		}
		if rg.particle {
			ch.Rule = "bandwidth by the grid EMS risk estimate (" + ch.Rule + "); the particle method runs --iterations"
		}
		chc := ch
		rg.rep.Bands[b].Choice = &chc
		d.Tiles = ch.TileChoices
		rg.decide(b, d)
	}
	return rg.bs
}

// perTile gives every tile of band b its own solver from the smoothed
// choice map; the band's recorded choice becomes the map's medians.
func (rg *regulariser) perTile(c *chooser, b int, ch *Choice) {
	m := c.tileMap(b, *ch)
	rg.bs.byTile[b] = map[[2]int]Solver{}
	var ks []weighted
	var es []float64
	for row := range rg.plan.Rows {
		for col := range rg.plan.Cols {
			tc := m[[2]int{col, row}]
			ch.TileChoices = append(ch.TileChoices, tc)
			rg.bs.byTile[b][[2]int{col, row}] = rg.solverFor(b, tc.Smooth, tc.Iterations)
			ks = append(ks, weighted{V: float64(tc.Iterations), W: 1})
			es = append(es, tc.Smooth)
		}
	}
	ch.Smooth, ch.Iterations = level.LowMedian(es), int(level.WeightedMedian(ks))
	ch.Rule += ", per tile, 3x3 median-smoothed map"
}

// keptTile is a single-tile band's chosen iterate, computed on the scene
// (without the halo) during the choice; it is the solver of the final pass
// and places the iterate in the tile's window.
type keptTile struct {
	f      []float32
	w, h   int
	x0, y0 int
	res    Result
	smooth float64
}

func (kt *keptTile) Name() string { return "grid" }

func (kt *keptTile) Solve(_ context.Context, _ *Workspace, p *Problem, dst []float32) (Result, error) {
	for i := range dst[:p.W*p.H] {
		dst[i] = 0
	}
	for y := 0; y < kt.h; y++ {
		copy(dst[(kt.y0+y)*p.W+kt.x0:(kt.y0+y)*p.W+kt.x0+kt.w], kt.f[y*kt.w:(y+1)*kt.w])
	}
	return kt.res, nil
}
