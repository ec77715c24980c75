package step

import (
	"context"
	"math"

	"limpid/step/mix"
)

// The grid method's noise error map: the standard deviation of the restored
// value caused by the data noise, propagated through the linearised EMS
// recursion.
//
// The restored tile is f_K(d), a smooth function of the data d. Linearised
// about the observed data, its error is J e, with J the Jacobian of d ->
// f_K and e the data noise (covariance Sigma = diag v(d), the band's noise
// model), so the error covariance is J Sigma J^T and the wanted map the
// square root of its diagonal. With a Rademacher probe z (entries +-1,
// independent), u = J Sigma^(1/2) z satisfies E[u_i^2] = (J Sigma J^T)_ii
// (Hutchinson, Comm. Statist. Simul. Comput. 18(3):1059-1076, 1989, applied
// to the diagonal as in Bekas, Kokiopoulou & Saad, Appl. Numer. Math.
// 57(11-12):1214-1229, 2007). u is carried along the iterations by the same
// forward-mode recursion the automatic choice uses for its divergence (see
// the doc comment of auto.go), with delta = sqrt(v) z, at the cost of one
// more EMS iteration per iteration. One probe is noisy per pixel, so u^2 is
// averaged over a (2 NoiseMapRadius + 1)^2 window of valid pixels: the map
// resolves structures a few pixels wide, as the restoration's own
// smoothing does. Its accuracy against a Monte Carlo over noise
// realisations is measured in TestNoiseMapMatchesMonteCarlo.
//
// What it does not hold: errors of the PSF or of the noise model, and the
// bias of the regularisation (the restored image differs from the scene even
// without noise).

// NoiseMapRule and NoiseMapBlendRule describe the map in its metadata.
const (
	NoiseMapRule      = "data noise (the band's noise model) propagated through the linearised EMS recursion: one Rademacher probe scaled by the noise standard deviation, its squared derivative averaged over 7 x 7 valid pixels (Hutchinson 1989)"
	NoiseMapBlendRule = "tiles blended linearly (overlapping tiles restore the same data: their errors are fully correlated)"
)

// NoiseMapRadius is the half-width of the window over which the probe's
// squared derivative is averaged (pixels).
const NoiseMapRadius = 3

// noiseProbeKey separates the noise map's probe stream from the automatic
// choice's (both derive from the tile key).
const noiseProbeKey = 0x6E6F6973656D6170

// solveNoiseMap is GridEMS.Solve carrying the derivative along the probe
// delta = sqrt(v(d)) z; it writes the object into dst and the noise
// standard error into p.SE. The f update is iterateJVP's, which reproduces
// iterate's float32 operations, so dst is bit for bit what Solve gives.
func (g *GridEMS) solveNoiseMap(ctx context.Context, ws *Workspace, p *Problem, dst []float32) (Result, error) {
	n := p.W * p.H
	ws.reset(n)
	nValid, flux := Prepare(p)
	if nValid == 0 || !(flux > 0) {
		clear(dst[:n])
		clear(p.SE[:n])
		return Result{Flat: true, HasSE: true}, nil
	}
	if ws.auto == nil {
		ws.auto = &autoWork{}
	}
	aw := ws.auto
	aw.reset(p.W, p.H)
	stream := noiseProbeKey ^ mix.ProbeStream(p.Key.Band, p.Key.Col, p.Key.Row)
	var dsum float64
	for i := 0; i < n; i++ {
		if p.Mask[i] == 0 {
			aw.delta[i] = 0
			continue
		}
		s := float32(math.Sqrt(float64(max(p.SENoise.Variance(p.D[i]), 0))))
		if mix.Counter(stream^uint64(i))&1 != 0 {
			s = -s
		}
		aw.delta[i] = s
		dsum += float64(s)
	}
	// The flat start mean(d - b) moves by mean(delta) (over valid pixels).
	c, u0 := float32(flux/float64(nValid)), float32(dsum/float64(nValid))
	f, fn, u, un := aw.f[:n], aw.fn[:n], aw.u[:n], aw.un[:n]
	for i := range f {
		f[i], u[i] = c, u0
	}
	g.H.Adjoint(&ws.conv, ws.s, p.Mask, p.W, p.H)
	target := g.discrepancyTarget(p)
	var res Result
	for k := 0; k < g.Iterations; k++ {
		if err := ctx.Err(); err != nil {
			return res, err
		}
		rss := g.iterateJVP(ws, aw, p, f, fn, u, un, target >= 0)
		if target >= 0 && k > 0 && rss <= target {
			break
		}
		change := relChange(fn[:n], f)
		f, fn = fn, f
		u, un = un, u
		res.Iterations, res.Change = k+1, change
		if p.Record {
			res.Changes = append(res.Changes, change)
		}
		if g.Observe != nil {
			g.Observe(k+1, f, change)
		}
		if g.Tolerance > 0 && change < g.Tolerance {
			break
		}
	}
	copy(dst[:n], f)
	localRMS(p.SE[:n], u, p.Mask[:n], p.W, p.H, NoiseMapRadius, aw.ue[:n], aw.hu[:n])
	res.HasSE = true
	return res, nil
}

// discrepancyTarget is Morozov's target tau^2 sum_valid Var(d), or -1
// without the discrepancy stop.
func (g *GridEMS) discrepancyTarget(p *Problem) float64 {
	if g.Noise == nil {
		return -1
	}
	var v float64
	for i, m := range p.Mask[:p.W*p.H] {
		if m != 0 {
			v += float64(g.Noise.Variance(p.D[i]))
		}
	}
	return g.Tau * g.Tau * v
}

// relChange is sum|fn - f| / sum|f| (0 when f is zero).
func relChange(fn, f []float32) float64 {
	var num, den float64
	for i := range fn {
		num += math.Abs(float64(fn[i] - f[i]))
		den += math.Abs(float64(f[i]))
	}
	if den == 0 {
		return 0
	}
	return num / den
}

// localRMS writes into dst the root mean square of u over the valid pixels
// of the (2r+1)^2 window around each pixel (0 where the window holds none),
// by running sums along rows (into the scratch planes sum and cnt, len w*h)
// then along columns.
func localRMS(dst, u, mask []float32, w, h, r int, sum, cnt []float32) {
	for y := 0; y < h; y++ {
		row, m := u[y*w:(y+1)*w], mask[y*w:(y+1)*w]
		var s, c float64
		add := func(x int, sign float64) {
			if x >= 0 && x < w && m[x] != 0 {
				s += sign * float64(row[x]) * float64(row[x])
				c += sign
			}
		}
		for x := 0; x < r; x++ {
			add(x, 1)
		}
		for x := 0; x < w; x++ {
			add(x+r, 1)
			add(x-r-1, -1)
			sum[y*w+x], cnt[y*w+x] = float32(s), float32(c)
		}
	}
	for x := 0; x < w; x++ {
		var s, c float64
		add := func(y int, sign float64) {
			if y >= 0 && y < h {
				s += sign * float64(sum[y*w+x])
				c += sign * float64(cnt[y*w+x])
			}
		}
		for y := 0; y < r; y++ {
			add(y, 1)
		}
		for y := 0; y < h; y++ {
			add(y+r, 1)
			add(y-r-1, -1)
			if c > 0.5 {
				dst[y*w+x] = float32(math.Sqrt(max(s, 0) / c))
			} else {
				dst[y*w+x] = 0
			}
		}
	}
}
