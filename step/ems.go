package step

import (
	"context"
	"limpid/step/conv"
	"limpid/step/internal/plane"
	"limpid/step/internal/vec"
	"limpid/step/noise"
)

// Problem is one tile to restore: the observed plane D (W x H, row-major),
// its validity mask (1 valid, 0 invalid) and the additive background.
// Invalid entries of D are ignored; valid ones are clamped at 0 by Prepare.
type Problem struct {
	D          []float32
	Mask       []float32
	W, H       int
	Background float32
	// Key identifies the tile (random streams derive from it, never from
	// the scheduler).
	Key TileKey
	// SE, when non-nil (length W*H), receives the per-pixel Monte Carlo
	// standard error of the result from solvers that estimate one; they set
	// Result.HasSE. Deterministic solvers leave it untouched.
	SE []float32
	// Record asks the solver to keep the relative change of every
	// iteration in Result.Changes (a few tiles per scene, for the report).
	Record bool
	// SENoise, with SE, asks deterministic solvers for the standard error
	// the data noise (this variance model) causes: GridEMS writes it into
	// SE (noisemap.go) and sets Result.HasSE.
	SENoise *noise.Model
	// NoiseSE, with SENoise, receives the data-noise part from solvers
	// whose SE is a Monte Carlo error (ParticleEMS: Result.HasNoiseSE).
	NoiseSE []float32
}

// TileKey names a tile: 0-based band index in the output, tile column, row.
type TileKey struct{ Band, Col, Row int }

// Result summarises one solve.
type Result struct {
	Iterations int
	// Change is the last relative L1 change sum|f_k+1 - f_k| / sum|f_k|.
	Change float64
	// Flat is true when the tile had no flux above background (or no valid
	// pixel): the object stays zero.
	Flat bool
	// HasSE is true when the solver wrote Problem.SE.
	HasSE bool
	// HasNoiseSE is true when the solver wrote Problem.NoiseSE.
	HasNoiseSE bool
	// Changes holds the relative change per iteration when
	// Problem.Record was set and the solver keeps a history.
	Changes []float64
}

// Solver restores one tile into dst (the object f, background excluded).
// Implementations are deterministic given the problem.
type Solver interface {
	Solve(ctx context.Context, ws *Workspace, p *Problem, dst []float32) (Result, error)
	// Name is the method name recorded in reports ("grid").
	Name() string
}

// Workspace is one worker's scratch memory, reused across tiles; it grows to
// the largest tile and never allocates in the iteration loop afterwards.
type Workspace struct {
	conv              conv.Work
	f, fn, p, q, t, s []float32
	auto              *autoWork
	pw                *particleWork // particle method state (particle.go)
	twin              []float32     // the particle's grid twin's object (particle.go)
}

func (ws *Workspace) reset(n int) {
	ws.f = grow(ws.f, n)
	ws.fn = grow(ws.fn, n)
	ws.p = grow(ws.p, n)
	ws.q = grow(ws.q, n)
	ws.t = grow(ws.t, n)
	ws.s = grow(ws.s, n)
}

// GridEMS is the EMS algorithm of Silverman, Jones, Wilson & Nychka (JRSS-B
// 52:271-324, 1990) on the pixel grid, with background b, validity mask w and
// sensitivity s = H^T w:
//
//	e = (f / s) * H^T( w * d / (H f + b) ),   f_next = S e.
//
// With S = I and b = 0 it is Richardson-Lucy (Richardson 1972; Lucy 1974),
// the Poisson maximum-likelihood EM of Shepp & Vardi (IEEE TMI 1:113, 1982).
// The start is a flat image carrying the tile's flux above background.
type GridEMS struct {
	H *conv.Operator
	// S is the smoothing operator; nil means identity (Richardson-Lucy);
	// Smooth is the bandwidth it was built from (for the record).
	S      *conv.Operator
	Smooth float64
	// Iterations is the maximum number of iterations (>= 1).
	Iterations int
	// Tolerance stops early when the relative L1 change falls below it
	// (0 = never).
	Tolerance float64
	// Observe, when set, is called after every iteration with the iterate
	// (valid until the next call) and its relative change.
	Observe func(k int, f []float32, change float64)
	// Noise and Tau, when Noise is set, stop by Morozov's discrepancy
	// principle: at the first iterate with sum_valid (d - H f - b)^2 <=
	// Tau^2 sum_valid Var(d).
	Noise *noise.Model
	Tau   float64
}

// Name implements Solver.
func (g *GridEMS) Name() string { return "grid" }

// sensitivityFloor: below it a pixel receives no data term (no valid
// observation within the PSF's reach) and keeps its value.
const sensitivityFloor = 1e-6

// Prepare clamps valid data at 0 (EMS needs d >= 0), zeroes invalid data and
// returns the number of valid pixels and the flux above background.
func Prepare(p *Problem) (nValid int, flux float64) {
	for i, m := range p.Mask[:p.W*p.H] {
		if m == 0 {
			p.D[i] = 0
			continue
		}
		if !(p.D[i] > 0) {
			p.D[i] = 0
		}
		nValid++
		flux += float64(p.D[i]) - float64(p.Background)
	}
	return nValid, flux
}

// record books iterate k (now f, with relative change change) in res,
// reports it to Observe, and says whether the change stop ends the run:
// the bookkeeping both solves share.
func (g *GridEMS) record(res *Result, p *Problem, k int, f []float32, change float64) (stop bool) {
	res.Iterations, res.Change = k, change
	if p.Record {
		res.Changes = append(res.Changes, change)
	}
	if g.Observe != nil {
		g.Observe(k, f, change)
	}
	return g.Tolerance > 0 && change < g.Tolerance
}

// Solve implements Solver.
func (g *GridEMS) Solve(ctx context.Context, ws *Workspace, p *Problem, dst []float32) (Result, error) {
	if p.SE != nil && p.SENoise != nil {
		return g.solveNoiseMap(ctx, ws, p, dst)
	}
	n := p.W * p.H
	ws.reset(n)
	nValid, flux := Prepare(p)
	if nValid == 0 || !(flux > 0) {
		for i := range dst[:n] {
			dst[i] = 0
		}
		return Result{Flat: true}, nil
	}
	c := float32(flux / float64(nValid))
	f := ws.f
	for i := range f {
		f[i] = c
	}
	g.H.Adjoint(&ws.conv, ws.s, p.Mask, p.W, p.H)
	target := g.discrepancyTarget(p)
	var res Result
	for k := 0; k < g.Iterations; k++ {
		if err := ctx.Err(); err != nil {
			return res, err
		}
		change, rss := g.iterate(ws, p, f, ws.fn, target >= 0)
		if target >= 0 && k > 0 && rss <= target {
			// f (iterate k) already fits the data to the noise level.
			break
		}
		f, ws.fn = ws.fn, f
		if g.record(&res, p, k+1, f, change) {
			break
		}
	}
	ws.f = f
	copy(dst[:n], f)
	return res, nil
}

// iterate computes fn = S e(f) and returns the relative L1 change and,
// with wantRSS, the residual sum of squares of f over valid pixels.
func (g *GridEMS) iterate(ws *Workspace, p *Problem, f, fn []float32, wantRSS bool) (change, rss float64) {
	w, h := p.W, p.H
	n := w * h
	b := p.Background
	g.H.Apply(&ws.conv, ws.p, f, w, h)
	pp, q, d, m := ws.p[:n], ws.q[:n], p.D[:n], p.Mask[:n]
	if wantRSS {
		// The same sum in the same order as iterateJVP (auto.go): both
		// solves must stop at the same iterate.
		for i := range pp {
			if m[i] != 0 {
				e := float64(d[i] - pp[i] - b)
				rss += e * e
			}
		}
	}
	vec.Ratio(q, pp, d, m, b)
	g.H.Adjoint(&ws.conv, ws.t, q, w, h)
	e := fn
	if g.S != nil {
		e = ws.p // H f is no longer needed
	}
	vec.Update(e[:n], f[:n], ws.t[:n], ws.s[:n], sensitivityFloor)
	if g.S != nil {
		g.S.Apply(&ws.conv, fn, e, w, h)
	}
	return plane.RelChange(fn[:n], f[:n]), rss
}
