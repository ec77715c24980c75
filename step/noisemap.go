package step

import (
	"context"
	"math"

	"limpid/step/internal/plane"
	"limpid/step/mix"
)

// The grid method's noise error map (DEVELOPERS.md, "Noise error map"):
// with J the Jacobian of d -> f_K and Sigma = diag v(d) (the band's noise
// model), the map is sqrt(diag(J Sigma J^T)). With a Rademacher probe z,
// u = J Sigma^(1/2) z has E[u_i^2] = (J Sigma J^T)_ii (Hutchinson, Comm.
// Statist. Simul. Comput. 18(3):1059-1076, 1989; for the diagonal, Bekas,
// Kokiopoulou & Saad, Appl. Numer. Math. 57(11-12):1214-1229, 2007). u is
// carried by auto.go's forward-mode recursion with delta = sqrt(v) z (one
// more EMS iteration's work per iteration) and u^2 averaged over
// (2 NoiseMapRadius + 1)^2 valid pixels. PSF and noise-model errors and the
// regularisation's bias are not in it.

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
		change := plane.RelChange(fn[:n], f)
		f, fn = fn, f
		u, un = un, u
		if g.record(&res, p, k+1, f, change) {
			break
		}
	}
	copy(dst[:n], f)
	plane.LocalRMS(p.SE[:n], u, p.Mask[:n], p.W, p.H, NoiseMapRadius, aw.ue[:n], aw.hu[:n])
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
