package step

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"sync"
	"time"

	"limpid/psf"
	"limpid/raster"
	"limpid/step/conv"
	"limpid/step/draw"
	"limpid/step/internal/option"
	"limpid/step/internal/vec"
	"limpid/step/mix"
	"limpid/step/resample"
)

// The particle method's option types live in step/internal/option.
type (
	Potential = option.Potential
	Start     = option.Start
)

// Potentials and starts (see option).
const (
	PotentialExact, PotentialSampled = option.PotentialExact, option.PotentialSampled
	StartFlat, StartObserved         = option.StartFlat, option.StartObserved
)

// ParsePotential and ParseStart read the flags' words (see option).
var (
	ParsePotential = option.ParsePotential
	ParseStart     = option.ParseStart
)

// ParticleTiming accumulates where a ParticleEMS spends its time (for the
// benchmark's split; option.Timing); nil in production.
type ParticleTiming = option.Timing

// ParticleEMS is the sequential Monte Carlo approximation of EMS: "A
// particle method for solving Fredholm equations of the first kind" (Crucinio,
// Doucet & Johansen, JASA 2021, arXiv:2009.09974), on limpid's pixel grid.
// N = PerPixel x (valid pixels) particles X_i (float32 tile coordinates,
// structure of arrays) with weights W_i and a tracked total mass M
// approximate the tile's object. Each iteration:
//
//  1. splat: f_hat = M / sum(W) * sum_i W_i [X_i in pixel j] (each particle
//     deposits into the pixel cell that contains it);
//  2. h_n = H f_hat + b, r = w d / h_n, c = (H^T r) / s with s = H^T w, on
//     the grid with the solver's Conv;
//  3. reweight: W_i <- W_i c(X_i) (PotentialExact), or W_i <- W_i r(Y_i)/s(X_i)
//     with Y_i drawn from the PSF around X_i (PotentialSampled); the mass
//     follows the grid's, M <- M sum(W c)/sum(W);
//  4. resample when ESS = (sum W)^2 / sum W^2 < ESSThreshold x N;
//  5. mutate: each axis moves by an integer displacement drawn from the
//     grid's smoothing kernel (SmoothingKernel: for eps <= 0.5 the
//     variance-matched 3 taps, i.e. +-1 pixel with probability eps^2/2
//     each), reflected half-sample symmetrically at the tile border.
//
// After BurnIn iterations the smoothed density S(f_hat * c) (the expected
// density after reweighting, resampling and mutation given the cloud:
// Rao-Blackwellised over steps 4 and 5) is averaged over the remaining
// iterations: the output. The per-pixel Monte Carlo standard error written
// to Problem.SE comes from Replicates independent clouds (their spread), or
// with one cloud from batch means over the window (Batches batches), which
// underestimate it when the window is short against the autocorrelation of
// the iterations (measured in DEVELOPERS.md).
//
// With PotentialSampled the mass update uses the sampled potentials, so the
// flux is kept in expectation only.
//
// Why cells and discrete moves rather than cloud-in-cell (bilinear) weights
// and Gaussian moves: with cell deposits the splat and the gather of c are
// exact adjoints with no smoothing of their own, and the displacement law
// is exactly the grid's S, so the N -> infinity limit of the recursion is
// exactly grid EMS (GridEMS with the same H, S, b, w). Bilinear weights would
// add a tent kernel (variance 1/6 pixel^2 per axis) in the splat and again in
// the gather, i.e. a different, smoother EMS. Sub-pixel offsets are kept
// (multiples of 1/256 pixel, so integer moves are exact in float32) but do
// not enter the dynamics.
//
// Where s <= sensitivityFloor (no valid observation within the PSF's reach)
// the potential is 1: particles there keep their weight, as the grid keeps
// f there. Invalid pixels give no data term (r = 0) and receive particles
// only through the smoothing moves. The flat start covers the valid pixels
// only (the grid's flat start covers the whole tile); the fixed point does
// not depend on the start.
//
// Random numbers: a math/rand/v2 PCG seeded from (Seed, Problem.Key) only,
// so results are identical for any worker count and tile order.
type ParticleEMS struct {
	H *conv.Operator
	// PSF is the kernel H was built from (needed by PotentialSampled).
	PSF *psf.Kernel
	// SmoothX, SmoothY are the 1-D smoothing kernels (odd length, from
	// SmoothingKernel); nil means no move along that axis.
	SmoothX, SmoothY []float64
	Smooth           float64 // the bandwidth they come from (for the record)
	Iterations       int
	// PerPixel is K, the number of particles per valid pixel (>= 1).
	PerPixel   int
	Potential  Potential
	Resampling resample.Scheme
	// ESSThreshold: resample when ESS < ESSThreshold x N (0 never, 1 always
	// unless the weights are equal).
	ESSThreshold float64
	// BurnIn iterations are discarded before averaging (0 <= BurnIn <
	// Iterations).
	BurnIn int
	Start  Start
	// Replicates G >= 2 runs G independent clouds of PerPixel/G particles
	// per pixel (PerPixel must be a multiple of G); the output is their mean
	// and the standard error comes from their spread, sqrt(sum (f_g -
	// mean)^2 / (G (G-1))). G <= 1 runs one cloud with batch means.
	Replicates int
	// Batches is the number of batch means for the standard error when
	// Replicates <= 1 (>= 2, <= Iterations - BurnIn).
	Batches int
	Seed    uint64
	// RawEstimate averages the splatted cloud after mutation instead of the
	// Rao-Blackwellised S(f_hat * c) (same expectation; for measurements).
	RawEstimate bool
	// Timing, when set, accumulates the time per phase.
	Timing *ParticleTiming

	once       sync.Once
	s          *conv.Operator
	grid       *GridEMS // the EMS recursion it approximates (Solve's noise part)
	mutX, mutY draw.Move
	jump       draw.Jump
	alias      draw.Alias
}

// Name implements Solver.
func (pe *ParticleEMS) Name() string { return "particle" }

func (pe *ParticleEMS) init() {
	sx, sy := pe.SmoothX, pe.SmoothY
	if sx == nil {
		sx = []float64{1}
	}
	if sy == nil {
		sy = []float64{1}
	}
	if len(sx) > 1 || len(sy) > 1 {
		pe.s = conv.NewSeparable(sx, sy)
	}
	pe.mutX, pe.mutY = draw.NewMove(pe.SmoothX), draw.NewMove(pe.SmoothY)
	pe.grid = &GridEMS{H: pe.H, S: pe.s, Smooth: pe.Smooth, Iterations: pe.Iterations}
	pe.jump = draw.NewJump(pe.SmoothX, pe.SmoothY)
	if pe.Potential == PotentialSampled && pe.PSF != nil {
		pe.alias = draw.NewAlias(pe.PSF)
	}
}

// particleWork is one worker's particle state, reused across tiles.
type particleWork struct {
	x, y, w   []float32 // the cloud
	x2, y2    []float32 // resampling destination; scratch
	cnt       []uint32
	fhat, c   []float32 // grid planes
	est, prev []float32
	sum, bsum []float64
	bmean, m2 []float64
	rmean     []float64 // replicates: Welford mean and M2 of the estimates
	rm2       []float64
	rng       rand.PCG
}

func (pw *particleWork) reset(np, n int) {
	pw.x, pw.y, pw.w = grow(pw.x, np), grow(pw.y, np), grow(pw.w, np)
	pw.x2, pw.y2 = grow(pw.x2, max(np, n)), grow(pw.y2, np)
	pw.cnt = growU32(pw.cnt, max(np, n))
	pw.fhat, pw.c, pw.est, pw.prev = grow(pw.fhat, n), grow(pw.c, n), grow(pw.est, n), grow(pw.prev, n)
	pw.sum, pw.bsum = grow64(pw.sum, n), grow64(pw.bsum, n)
	pw.bmean, pw.m2 = grow64(pw.bmean, n), grow64(pw.m2, n)
	for _, p := range [][]float64{pw.sum, pw.bsum, pw.bmean, pw.m2} {
		clear(p)
	}
}

// TileStream is the second PCG word of a tile's particle system
// (mix.ParticleStream).
func TileStream(k TileKey) uint64 { return mix.ParticleStream(k.Band, k.Col, k.Row) }

// subpixel returns a sub-pixel offset in (0, 1), an odd multiple of 1/256,
// from 7 random bits: float32 coordinates below 2^16 (any tile with its
// halo) stay exact under integer moves.
func subpixel(u uint64) float32 { return (float32(u&0x7f) + 0.5) / 128 }

// startCloud places K particles per valid pixel and returns their number.
func (pe *ParticleEMS) startCloud(pw *particleWork, ws *Workspace, p *Problem, K int) int {
	w, h := p.W, p.H
	nValid := 0
	for _, m := range p.Mask[:w*h] {
		if m != 0 {
			nValid++
		}
	}
	j := 0
	place := func(pix, copies int) {
		px, py := float32(pix%w), float32(pix/w)
		for c := 0; c < copies; c++ {
			u := pw.rng.Uint64()
			pw.x[j] = px + subpixel(u)
			pw.y[j] = py + subpixel(u>>8)
			pw.w[j] = 1
			j++
		}
	}
	np := K * nValid
	switch pe.Start {
	case StartObserved:
		mass := ws.fn[:w*h]
		var msum float64
		for i, m := range p.Mask[:w*h] {
			v := float32(0)
			if m != 0 && p.D[i] > p.Background {
				v = p.D[i] - p.Background
			}
			mass[i] = v
			msum += float64(v)
		}
		resample.Systematic.Counts(pw.cnt[:w*h], mass, msum, np, nil, &pw.rng)
		for i, c := range pw.cnt[:w*h] {
			place(i, int(c))
		}
	default:
		for i, m := range p.Mask[:w*h] {
			if m != 0 {
				place(i, K)
			}
		}
	}
	return j
}

// splatCells sets f[j] = scale * sum of w over particles in pixel cell j.
func splatCells(f, x, y, w []float32, width int, scale float32) {
	clear(f)
	y, w = y[:len(x)], w[:len(x)]
	for i, xi := range x {
		f[int(y[i])*width+int(xi)] += w[i] * scale
	}
}

// reweightExact sets w_i <- alpha w_i c(X_i) and returns sum w and sum w^2.
func reweightExact(x, y, w, c []float32, width int, alpha float32) (sum, sq float64) {
	y, w = y[:len(x)], w[:len(x)]
	// Partial sums in float32 over blocks of 256 keep float64 work low;
	// 256 terms of similar size lose at most ~256 ulp of float32 (~1.5e-5
	// relative) per block, and blocks are summed in float64.
	for b := 0; b < len(x); b += 256 {
		e := min(b+256, len(x))
		var s, q float32
		for i := b; i < e; i++ {
			v := w[i] * alpha * c[int(y[i])*width+int(x[i])]
			w[i] = v
			s += v
			q += v * v
		}
		sum += float64(s)
		sq += float64(q)
	}
	return sum, sq
}

// reweightSampled draws Y_i = X_i + U (U from the PSF, mirrored at the tile
// border) and sets w_i <- alpha w_i r(Y_i) / s(X_i) (1 where s is below the
// floor).
func (pe *ParticleEMS) reweightSampled(pw *particleWork, r, s []float32, width, height int, alpha float32) (sum, sq float64) {
	x, y, w := pw.x, pw.y[:len(pw.x)], pw.w[:len(pw.x)]
	a := &pe.alias
	for i, xi := range x {
		cx, cy := int(xi), int(y[i])
		si := s[cy*width+cx]
		v := w[i] * alpha
		if si > sensitivityFloor {
			t := a.Draw(pw.rng.Uint64())
			yx, yy := cx+int(a.DX[t]), cy+int(a.DY[t])
			if yx < 0 || yx >= width {
				yx = raster.Mirror(yx, width)
			}
			if yy < 0 || yy >= height {
				yy = raster.Mirror(yy, height)
			}
			v *= r[yy*width+yx] / si
		}
		w[i] = v
		sum += float64(v)
		sq += float64(v) * float64(v)
	}
	return sum, sq
}

// reflect maps a coordinate whose cell left [0, n) back by half-sample
// symmetric reflection of the cell, keeping the sub-pixel offset (cell c < 0
// goes to -1-c, cell c >= n to 2n-1-c).
func reflect(v float32, n int) float32 {
	for {
		c := float32(math.Floor(float64(v)))
		switch {
		case v < 0:
			v -= 2*c + 1
		case v >= float32(n):
			v += 2*float32(n) - 1 - 2*c
		default:
			return v
		}
	}
}

// mutate moves every particle by integer displacements drawn from the
// smoothing kernel per axis, reflected at the tile border.
func (pe *ParticleEMS) mutate(pw *particleWork, width, height int) {
	x, y := pw.x, pw.y[:len(pw.x)]
	if j := &pe.jump; j.On {
		fw, fh := float32(width), float32(height)
		for i := j.Gap(&pw.rng); i < len(x); i += 1 + j.Gap(&pw.rng) {
			u := uint64(uint32(pw.rng.Uint64()))
			t := 0
			for u >= j.Cum[t] {
				t++
			}
			if dx := j.DX[t]; dx != 0 {
				v := x[i] + dx
				if v < 0 || v >= fw {
					v = reflect(v, width)
				}
				x[i] = v
			}
			if dy := j.DY[t]; dy != 0 {
				v := y[i] + dy
				if v < 0 || v >= fh {
					v = reflect(v, height)
				}
				y[i] = v
			}
		}
		return
	}
	mx, my := &pe.mutX, &pe.mutY
	fw, fh := float32(width), float32(height)
	switch {
	case mx.On() && my.On():
		for i := range x {
			u := pw.rng.Uint64()
			if dx := mx.Move(uint32(u)); dx != 0 {
				v := x[i] + dx
				if v < 0 || v >= fw {
					v = reflect(v, width)
				}
				x[i] = v
			}
			if dy := my.Move(uint32(u >> 32)); dy != 0 {
				v := y[i] + dy
				if v < 0 || v >= fh {
					v = reflect(v, height)
				}
				y[i] = v
			}
		}
	case mx.On():
		for i := range x {
			if dx := mx.Move(uint32(pw.rng.Uint64())); dx != 0 {
				v := x[i] + dx
				if v < 0 || v >= fw {
					v = reflect(v, width)
				}
				x[i] = v
			}
		}
	case my.On():
		for i := range y {
			if dy := my.Move(uint32(pw.rng.Uint64())); dy != 0 {
				v := y[i] + dy
				if v < 0 || v >= fh {
					v = reflect(v, height)
				}
				y[i] = v
			}
		}
	}
}

// resample replaces the cloud by N offspring in ancestor order (which keeps
// the cloud roughly sorted by pixel, good for the cache) with unit weights.
func (pe *ParticleEMS) resample(pw *particleWork, wsum float64) {
	np := len(pw.x)
	x2, y2 := pw.x2[:np], pw.y2[:np]
	if pe.Resampling == resample.Stratified || pe.Resampling == resample.Systematic {
		resample.Merge(x2, y2, pw.x, pw.y, pw.w, wsum, pe.Resampling == resample.Stratified, &pw.rng)
	} else {
		pe.Resampling.Counts(pw.cnt[:np], pw.w, wsum, np, pw.x2, &pw.rng)
		j := 0
		for i, c := range pw.cnt[:np] {
			xi, yi := pw.x[i], pw.y[i]
			for ; c > 0; c-- {
				x2[j], y2[j] = xi, yi
				j++
			}
		}
	}
	pw.x, pw.x2 = x2, pw.x[:cap(pw.x)]
	pw.y, pw.y2 = y2, pw.y[:cap(pw.y)]
	w := pw.w[:np]
	for i := range w {
		w[i] = 1
	}
}

// Solve implements Solver. With Problem.SENoise and NoiseSE it also writes
// the data-noise part of the error into NoiseSE. The particle estimate is not
// differentiable along the data pathwise (resampling and the random moves
// are discontinuous in d), but as N -> infinity it follows the EMS recursion
// with the same H, S and iteration count (Crucinio, Doucet & Johansen, JASA
// 2021, arXiv:2009.09974); so the part is that recursion's noise error map
// (GridEMS.solveNoiseMap), on the same tile problem. The two parts come
// from independent sources, so their variances add (runner.outputSE).
func (pe *ParticleEMS) Solve(ctx context.Context, ws *Workspace, p *Problem, dst []float32) (Result, error) {
	res, err := pe.solve(ctx, ws, p, dst)
	if err != nil || p.NoiseSE == nil || p.SENoise == nil {
		return res, err
	}
	q := *p
	q.SE, q.NoiseSE, q.Record = p.NoiseSE, nil, false
	ws.twin = grow(ws.twin, p.W*p.H)
	g, err := pe.grid.solveNoiseMap(ctx, ws, &q, ws.twin)
	res.HasNoiseSE = err == nil && g.HasSE
	return res, err
}

func (pe *ParticleEMS) solve(ctx context.Context, ws *Workspace, p *Problem, dst []float32) (Result, error) {
	if pe.PerPixel < 1 || pe.Iterations < 1 || pe.BurnIn < 0 || pe.BurnIn >= pe.Iterations {
		return Result{}, fmt.Errorf("particle EMS: need PerPixel >= 1 and 0 <= BurnIn < Iterations (got %d, %d, %d)", pe.PerPixel, pe.BurnIn, pe.Iterations)
	}
	pe.once.Do(pe.init)
	w, h := p.W, p.H
	n := w * h
	ws.reset(n)
	nValid, flux := Prepare(p)
	if nValid == 0 || !(flux > 0) {
		clear(dst[:n])
		if p.SE != nil {
			clear(p.SE[:n])
		}
		return Result{Flat: true, HasSE: p.SE != nil}, nil
	}
	if ws.pw == nil {
		ws.pw = &particleWork{}
	}
	pw := ws.pw
	pe.H.Adjoint(&ws.conv, ws.s, p.Mask, w, h)
	G := min(pe.Replicates, pe.PerPixel)
	if G <= 1 {
		res, err := pe.run(ctx, ws, p, nValid, flux, pe.PerPixel, TileStream(p.Key), dst, p.SE)
		res.HasSE = err == nil && p.SE != nil
		return res, err
	}
	// Independent replicate clouds: the spread of their estimates gives an
	// unbiased variance of the mean whatever the autocorrelation of the
	// iterations (DEVELOPERS.md: batch means underestimate it at small
	// smoothing).
	pw.rmean, pw.rm2 = grow64(pw.rmean, n), grow64(pw.rm2, n)
	clear(pw.rmean)
	clear(pw.rm2)
	var res Result
	for g := 0; g < G; g++ {
		r, err := pe.run(ctx, ws, p, nValid, flux, pe.PerPixel/G, TileStream(p.Key)^(uint64(g)*mix.Golden), dst, nil)
		if err != nil {
			return r, err
		}
		res = r
		for i, v := range dst[:n] {
			d := float64(v) - pw.rmean[i]
			pw.rmean[i] += d / float64(g+1)
			pw.rm2[i] += d * (float64(v) - pw.rmean[i])
		}
	}
	for i, m := range pw.rmean {
		dst[i] = float32(m)
	}
	if p.SE != nil {
		inv := 1 / float64(G*(G-1))
		for i, v := range pw.rm2 {
			p.SE[i] = float32(math.Sqrt(v * inv))
		}
		res.HasSE = true
	}
	return res, nil
}

// run is one particle system with K particles per valid pixel on the random
// stream (Seed, stream): its window mean goes to dst, its batch-means
// standard error to se when non-nil.
func (pe *ParticleEMS) run(ctx context.Context, ws *Workspace, p *Problem, nValid int, flux float64, K int, stream uint64, dst, se []float32) (Result, error) {
	pr := pe.newRun(ws, p, nValid, flux, K, stream)
	var res Result
	for k := 0; k < pe.Iterations; k++ {
		if err := ctx.Err(); err != nil {
			return res, err
		}
		if err := pr.iterate(k); err != nil {
			return res, err
		}
		res.Iterations = k + 1
	}
	pr.finish(dst, se)
	res.Change = pr.change
	return res, nil
}

// particleRun is one particle system's state between iterations.
type particleRun struct {
	pe         *ParticleEMS
	ws         *Workspace
	pw         *particleWork
	p          *Problem
	w, h, n    int
	np         int
	mass, wsum float64
	fN         float64
	clock      lapClock
	// The averaging window (after burn-in) and its batches.
	T, nb                     int
	batch, batchEnd, batchLen int
	window                    int
	change                    float64
}

// lapClock adds the time since its last lap to a ParticleTiming field
// (nothing without a timing record).
type lapClock struct {
	tm *ParticleTiming
	t0 time.Time
}

func (c *lapClock) lap(d *time.Duration) {
	if c.tm != nil {
		t1 := time.Now()
		*d += t1.Sub(c.t0)
		c.t0 = t1
	}
}

// newRun draws the starting cloud.
func (pe *ParticleEMS) newRun(ws *Workspace, p *Problem, nValid int, flux float64, K int, stream uint64) *particleRun {
	pr := &particleRun{pe: pe, ws: ws, pw: ws.pw, p: p, w: p.W, h: p.H, n: p.W * p.H, clock: lapClock{tm: pe.Timing}}
	pw := pr.pw
	np := K * nValid
	pw.reset(np, pr.n)
	pw.rng.Seed(pe.Seed, stream)
	np = pe.startCloud(pw, ws, p, K)
	pw.x, pw.y, pw.w = pw.x[:np], pw.y[:np], pw.w[:np]
	pr.np = np
	if pr.clock.tm != nil {
		pr.clock.t0 = time.Now()
	}
	pr.T = pe.Iterations - pe.BurnIn
	pr.nb = max(pe.Batches, 1)
	pr.batchEnd, pr.batchLen = pr.T/pr.nb, pr.T/pr.nb
	pr.mass, pr.wsum = flux, float64(np)
	pr.fN = float64(np)
	return pr
}

// accumulate adds an estimate to the window mean and the batch means.
func (pr *particleRun) accumulate(est []float32) {
	pw := pr.pw
	// Change between consecutive estimates (relative L1).
	var num, den float64
	for i, v := range est {
		num += math.Abs(float64(v - pw.prev[i]))
		den += math.Abs(float64(pw.prev[i]))
		pw.sum[i] += float64(v)
		pw.bsum[i] += float64(v)
	}
	if pr.window > 0 && den > 0 {
		pr.change = num / den
	}
	copy(pw.prev, est)
	pr.window++
	if pr.window == pr.batchEnd {
		// Welford's update with the batch mean (Welford, Technometrics
		// 4:419, 1962).
		pr.batch++
		inv := 1 / float64(pr.batchLen)
		for i, s := range pw.bsum {
			m := s * inv
			d := m - pw.bmean[i]
			pw.bmean[i] += d / float64(pr.batch)
			pw.m2[i] += d * (m - pw.bmean[i])
			pw.bsum[i] = 0
		}
		if pr.batch < pr.nb {
			next := (pr.batch + 1) * pr.T / pr.nb
			pr.batchLen = next - pr.batchEnd
			pr.batchEnd = next
		}
	}
}

// iterate is iteration k: splat, reweight by the potential, estimate (after
// burn-in), resample when the effective sample size is low, mutate.
func (pr *particleRun) iterate(k int) error {
	pe, pw, ws, tm := pr.pe, pr.pw, pr.ws, pr.clock.tm
	w, h, n := pr.w, pr.h, pr.n
	splatCells(pw.fhat, pw.x, pw.y, pw.w, w, float32(pr.mass/pr.wsum))
	pr.clock.lap(&option.OrDiscard(tm).Splat)
	if pe.RawEstimate && k > pe.BurnIn {
		pr.accumulate(pw.fhat)
		pr.clock.lap(&option.OrDiscard(tm).Estimate)
	}
	pe.H.Apply(&ws.conv, ws.p, pw.fhat, w, h)
	q := ws.q[:n]
	vec.Ratio(q, ws.p[:n], pr.p.D[:n], pr.p.Mask[:n], pr.p.Background)
	sum, sq := pr.reweight(q)
	pr.clock.lap(&option.OrDiscard(tm).Reweight)
	if !(sum > 0) {
		return fmt.Errorf("particle EMS: all weights vanished at iteration %d", k+1)
	}
	pr.mass *= sum / pr.fN
	pr.wsum = sum
	if !pe.RawEstimate && k >= pe.BurnIn {
		pr.estimate()
		pr.clock.lap(&option.OrDiscard(tm).Estimate)
	}
	if sum*sum < pe.ESSThreshold*pr.fN*sq {
		pe.resample(pw, sum)
		pr.wsum = pr.fN
		if tm != nil {
			tm.Resamplings++
		}
		pr.clock.lap(&option.OrDiscard(tm).Resample)
	}
	pe.mutate(pw, w, h)
	pr.clock.lap(&option.OrDiscard(tm).Mutate)
	return nil
}

// reweight multiplies the particle weights by the potential G given the
// data ratio q and returns the sum and the sum of squares of the weights.
func (pr *particleRun) reweight(q []float32) (sum, sq float64) {
	pe, pw, ws := pr.pe, pr.pw, pr.ws
	alpha := float32(pr.fN / pr.wsum)
	if pe.Potential != PotentialExact {
		pr.clock.lap(&option.OrDiscard(pr.clock.tm).Convolution)
		return pe.reweightSampled(pw, q, ws.s, pr.w, pr.h, alpha)
	}
	pe.H.Adjoint(&ws.conv, ws.t, q, pr.w, pr.h)
	c, t, s := pw.c[:pr.n], ws.t[:pr.n], ws.s[:pr.n]
	for i := range c {
		if s[i] > sensitivityFloor {
			c[i] = t[i] / s[i]
		} else {
			c[i] = 1
		}
	}
	pr.clock.lap(&option.OrDiscard(pr.clock.tm).Convolution)
	return reweightExact(pw.x, pw.y, pw.w, pw.c, pr.w, alpha)
}

// estimate accumulates the density after reweighting: f_hat * c exactly
// (cells), or the splat of the reweighted cloud for the sampled potential,
// smoothed by S.
func (pr *particleRun) estimate() {
	pe, pw, ws := pr.pe, pr.pw, pr.ws
	e := ws.fn[:pr.n]
	if pe.Potential == PotentialExact {
		for i, v := range pw.fhat[:pr.n] {
			e[i] = v * pw.c[i]
		}
	} else {
		splatCells(e, pw.x, pw.y, pw.w, pr.w, float32(pr.mass/pr.wsum))
	}
	if pe.s != nil {
		pe.s.Apply(&ws.conv, pw.est, e, pr.w, pr.h)
		pr.accumulate(pw.est)
	} else {
		pr.accumulate(e)
	}
}

// finish writes the window mean to dst and, when se is non-nil, the
// batch-means standard error of the window mean: sqrt(var(batch means) /
// nb) (e.g. Flegal & Jones, Ann. Statist. 38:1034, 2010).
func (pr *particleRun) finish(dst, se []float32) {
	pe, pw := pr.pe, pr.pw
	if pe.RawEstimate {
		splatCells(pw.fhat, pw.x, pw.y, pw.w, pr.w, float32(pr.mass/pr.wsum))
		pr.accumulate(pw.fhat)
	}
	if tm := pr.clock.tm; tm != nil {
		tm.ParticleIterations += int64(pr.np) * int64(pe.Iterations)
	}
	invT := 1 / float64(pr.window)
	for i, s := range pw.sum {
		dst[i] = float32(s * invT)
	}
	if se != nil {
		inv := 1 / float64((pr.nb-1)*pr.nb)
		for i, v := range pw.m2 {
			se[i] = float32(math.Sqrt(v * inv))
		}
	}
}

// tm0 lets lap take the address of a field of a possibly nil timing record.
