package step

import (
	"context"
	"math"

	"limpid/psf"
	"limpid/step/conv"
	"limpid/step/internal/plane"
	"limpid/step/internal/vec"
	"limpid/step/mix"
	"limpid/step/noise"
)

// Automatic regularisation: the smoothing bandwidth eps and the stopping
// iteration k of EMS chosen per scene by minimising an unbiased risk
// estimate (the methods cited below; the settings are measured in
// DEVELOPERS.md, "Automatic regularisation").
//
// The divergence of the EMS map d -> f_k is carried along the iteration by
// forward-mode differentiation with one random +-1 probe delta (Monte Carlo
// trace estimate: Ramani, Blu & Unser, IEEE TIP 17(9):1540-1554, 2008; the
// iterative form follows Vonesch, Ramani & Unser, ICIP 2008). With
// p = H f + b, q = w d / p, t = H^T q and f+ = S(f t / s):
//
//	dq = w (delta - q H u) / p,   u+ = S((u t + f H^T dq) / s),
//
// u_0 = mean(delta) because the flat start mean(d - b) depends on d.
//
// The risk is measured in the orthonormal 2-D DCT-II, where a symmetric PSF
// with half-sample symmetric boundaries is diagonal with eigenvalues h(k).
// With G = h / (h^2 + lambda) and Q^2 = h^2 / (h^2 + lambda),
//
//	R_k = sum Q^2 F_k^2 - 2 sum G F_k D + 2 c sum G U_k (v delta)^
//
// estimates ||Q (f_k - x)||^2 - ||Q x||^2 without bias under Gaussian noise
// of variance v (Stein's lemma; the weighting idea is projected/generalised
// SURE, Eldar, IEEE TSP 57(2):471-481, 2009; the Poisson-Gaussian variance
// model follows Luisier, Blu & Unser, IEEE TIP 20(3):696-708, 2011). F, D,
// U are the DCTs of f_k, d - b and u_k; c = NoiseInflation. Tiles with
// invalid pixels use the same estimate on the masked prediction
// (riskProblem.maskedRisk); PSFs that the DCT does not diagonalise
// (asymmetric) fall back to the prediction-domain estimate over valid
// pixels:
//
//	R_k = sum w (H f_k + b - d)^2 - sum w v + 2 c sum w v delta (H u_k).

// Risk settings: values of our own prototype (common practice, no source),
// checked on the scenes of DEVELOPERS.md. riskLambda is the regularisation
// of the risk weights Q and G above.
var riskLambda = 0.01

// riskPlateau: an improvement smaller than this fraction of the risk's total
// decrease so far does not restart the patience (measured in DEVELOPERS.md,
// "Automatic regularisation").
var riskPlateau = 1e-3

const (
	// RiskPatience: a run stops this many iterations after its last
	// significant risk improvement (one larger than riskPlateau times the
	// total decrease so far).
	RiskPatience = 20
	// AutoCap is the default (soft) iteration cap with --stop auto: a run
	// whose risk still falls there goes on up to AutoHardCap.
	AutoCap     = 200
	AutoHardCap = 1000
	// NoiseInflation multiplies the estimated variance where the risk
	// estimate uses it: underestimating the noise is the dangerous side
	// (it makes the risk favour noise amplification; prototype value,
	// common practice, no source).
	NoiseInflation = 1.05
	// DiscrepancyTau is Morozov's tau (Morozov, Soviet Math. Dokl. 7:414,
	// 1966; recalled from memory: 1.01-1.1 is the usual range).
	DiscrepancyTau = 1.05
)

// AutoSmooths are the candidate bandwidths of the automatic choice (our
// prototype's grid, common practice, no source; 0.3 and 0.5 use the variance-matched 3-tap kernel, 0.7 a variance-matched
// Gaussian, see conv.SmoothingKernel).
var AutoSmooths = []float64{0, 0.3, 0.5, 0.7}

// riskEvaluated says at which iterations the risk is computed: every one up
// to 10, then every 2nd up to 30, then every 5th (the risk curve flattens
// near its minimum at large k, and each evaluation costs a 2-D DCT).
func riskEvaluated(k, cap int) bool {
	return k <= 10 || (k <= 30 && k%2 == 0) || k%5 == 0 || k == cap
}

// riskWeights are the DCT-domain weights Q^2, G and K of one tile size
// (conv.RiskWeights).
type riskWeights = conv.RiskWeights

func newRiskWeights(k *psf.Kernel, w, h int) (*riskWeights, bool) {
	return conv.NewRiskWeights(k, w, h, riskLambda)
}

// autoWork is one worker's scratch for the risk-carrying EMS.
type autoWork struct {
	f, fn, u, un, hu, dq, dt, ue, delta, v, best, wp, taper []float32
	cropD, cropM                                            []float32
	gd, gv, F                                               []float64
	dct                                                     *conv.DCT2
}

func (a *autoWork) reset(w, h int) {
	n := w * h
	for _, b := range []*[]float32{&a.f, &a.fn, &a.u, &a.un, &a.hu, &a.dq, &a.dt, &a.ue, &a.delta, &a.v, &a.best, &a.wp, &a.taper} {
		*b = grow(*b, n)
	}
	for _, b := range []*[]float64{&a.gd, &a.gv, &a.F} {
		if cap(*b) < n {
			*b = make([]float64, n)
		}
		*b = (*b)[:n]
	}
	if a.dct == nil || !a.dct.Fits(w, h) {
		a.dct = conv.NewDCT2(w, h)
	}
}

// riskRun is one candidate (eps) on one tile.
type riskRun struct {
	Smooth float64
	// Risk[k-1] is R_k (NaN where not evaluated).
	Risk  []float64
	BestK int
	BestR float64
	// Mode is the domain the risk was estimated in.
	Mode RiskMode
}

// riskProblem is what a tile's candidates share: the probe, the noise
// variance and the data projections.
type riskProblem struct {
	p      *Problem
	nValid int
	flux   float64
	dctOK  bool
	vsum   float64
	weight *riskWeights
	// infl is the noise inflation c (NoiseInflation; 1 in the
	// unbiasedness test).
	infl float64
	// masked: the tile has invalid pixels, so the DCT-domain estimate
	// runs on the masked prediction (rp.risk).
	masked bool
}

// setupRisk prepares the probe (PCG from the tile key and seed), the
// variance map and, in DCT mode, gd = C^T G C (d - b) and
// gv = c C^T G C (v delta).
func setupRisk(aw *autoWork, p *Problem, nm *noise.Model, rw *riskWeights, seed uint64, infl float64) *riskProblem {
	w, h := p.W, p.H
	n := w * h
	aw.reset(w, h)
	rp := &riskProblem{p: p, infl: infl}
	rp.nValid, rp.flux = Prepare(p)
	stream := seed*mix.Golden ^ mix.ProbeStream(p.Key.Band, p.Key.Col, p.Key.Row)
	for i := 0; i < n; i++ {
		if p.Mask[i] == 0 {
			aw.delta[i], aw.v[i] = 0, 0
			continue
		}
		if mix.Counter(stream^uint64(i))&1 == 0 {
			aw.delta[i] = 1
		} else {
			aw.delta[i] = -1
		}
		aw.v[i] = nm.Variance(p.D[i])
		rp.vsum += float64(aw.v[i])
	}
	if rp.nValid == 0 {
		return rp
	}
	rp.dctOK = rw != nil
	if !rp.dctOK {
		return rp
	}
	rp.weight = rw
	rp.masked = rp.nValid < n
	// Full tiles: gd = C^T G C (d - b), gv = c C^T G C (v delta). Masked
	// tiles: the same with K in place of G and d - b zeroed on invalid
	// pixels (v delta is zero there already).
	wt := rw.G
	if rp.masked {
		wt = rw.K
		plane.Taper(aw.taper[:n], p.Mask[:n], w, h, plane.TaperRadius(rw.Radius), aw.ue[:n], aw.wp[:n])
	}
	tmp := aw.ue
	for i := 0; i < n; i++ {
		switch {
		case p.Mask[i] == 0:
			tmp[i] = 0
		case rp.masked:
			tmp[i] = aw.taper[i] * (p.D[i] - p.Background)
		default:
			tmp[i] = p.D[i] - p.Background
		}
	}
	aw.dct.Forward(aw.F, tmp)
	for i := range aw.F {
		aw.F[i] *= wt[i]
	}
	aw.dct.Inverse(aw.gd, aw.F)
	for i := 0; i < n; i++ {
		tmp[i] = float32(infl) * aw.v[i] * aw.delta[i]
		if rp.masked {
			tmp[i] *= aw.taper[i]
		}
	}
	aw.dct.Forward(aw.F, tmp)
	for i := range aw.F {
		aw.F[i] *= wt[i]
	}
	aw.dct.Inverse(aw.gv, aw.F)
	return rp
}

// runRisk runs EMS with eps = g.S's bandwidth and its derivative for up to
// capK iterations, stopping RiskPatience iterations after the risk minimum
// when patience is true. With keep, aw.best holds the best iterate.
//
// beat is the best risk another candidate reached on this tile (+Inf for
// none): with patience, a run whose minimum is above it stops as soon as
// its risk rises, since it can no longer win.
func runRisk(ctx context.Context, ws *Workspace, aw *autoWork, rp *riskProblem, g *GridEMS, capK int, patience, keep bool, beat float64) (riskRun, error) {
	p := rp.p
	w, h := p.W, p.H
	n := w * h
	run := riskRun{Risk: make([]float64, 0, capK), BestR: math.Inf(1), Mode: RiskPrediction}
	if rp.dctOK {
		run.Mode = RiskDCT
	}
	ws.reset(n)
	c := float32(rp.flux / float64(rp.nValid))
	var dsum float64
	for i := 0; i < n; i++ {
		dsum += float64(aw.delta[i])
	}
	u0 := float32(dsum / float64(rp.nValid))
	f, fn, u, un := aw.f[:n], aw.fn[:n], aw.u[:n], aw.un[:n]
	for i := range f {
		f[i], u[i] = c, u0
	}
	g.H.Adjoint(&ws.conv, ws.s, p.Mask, w, h)
	first, lastGain := math.NaN(), 0
	for k := 1; k <= capK; k++ {
		if err := ctx.Err(); err != nil {
			return run, err
		}
		g.iterateJVP(ws, aw, p, f, fn, u, un, false)
		f, fn = fn, f
		u, un = un, u
		r := math.NaN()
		if riskEvaluated(k, capK) {
			r = rp.risk(ws, aw, g, f, u)
		}
		run.Risk = append(run.Risk, r)
		if math.IsNaN(first) && !math.IsNaN(r) {
			first = r
		}
		if r < run.BestR {
			// Patience restarts only on a significant improvement, so a
			// curve that creeps down on a plateau stops too.
			if run.BestK == 0 || run.BestR-r > riskPlateau*(first-r) {
				lastGain = k
			}
			run.BestR, run.BestK = r, k
			if keep {
				copy(aw.best[:n], f)
			}
		}
		if patience && k-lastGain >= RiskPatience {
			break
		}
		if patience && r > run.BestR && run.BestR > beat {
			break
		}
	}
	return run, nil
}

// risk evaluates R for the iterate f with derivative u.
func (rp *riskProblem) risk(ws *Workspace, aw *autoWork, g *GridEMS, f, u []float32) float64 {
	p := rp.p
	n := p.W * p.H
	if rp.dctOK && rp.masked {
		return rp.maskedRisk(ws, aw, g, f, u)
	}
	if rp.dctOK {
		var t2, t3 float64
		t1 := aw.dct.Energy(rp.weight.Q2m1, f)
		for i := 0; i < n; i++ {
			t2 += float64(f[i]) * aw.gd[i]
			t3 += float64(u[i]) * aw.gv[i]
		}
		return t1 - 2*t2 + 2*t3
	}
	g.H.Apply(&ws.conv, ws.p, f, p.W, p.H)
	g.H.Apply(&ws.conv, aw.hu, u, p.W, p.H)
	var rss, div float64
	for i := 0; i < n; i++ {
		if p.Mask[i] == 0 {
			continue
		}
		e := float64(ws.p[i] + p.Background - p.D[i])
		rss += e * e
		div += float64(aw.v[i]) * float64(aw.delta[i]) * float64(aw.hu[i])
	}
	return rss - rp.vsum + 2*rp.infl*div
}

// maskedRisk is the DCT-domain estimate on a tile with invalid pixels: with
// W the tapered mask (plane.Taper) and K = (H^T H + lambda)^-1 (diagonal in
// the DCT, 1 / (h^2 + lambda)), it estimates ||K^(1/2) W H (f - x)||^2 -
// ||K^(1/2) W H x||^2 by
//
//	R = <P, K P> - 2 <P, K W (d - b)> + 2 c <W H u, K (v delta)>,  P = W H f
//
// (Stein's lemma on the valid pixels; Eldar's generalised SURE weighting).
// With W = I it is the full-tile estimate (H K H = Q^2, K H = G), so there
// is no threshold on the invalid share; invalid pixels enter neither term.
func (rp *riskProblem) maskedRisk(ws *Workspace, aw *autoWork, g *GridEMS, f, u []float32) float64 {
	p := rp.p
	n := p.W * p.H
	g.H.Apply(&ws.conv, aw.wp, f, p.W, p.H)
	g.H.Apply(&ws.conv, aw.hu, u, p.W, p.H)
	wp, hu, tp := aw.wp[:n], aw.hu[:n], aw.taper[:n]
	var t2, t3 float64
	for i := range wp {
		wp[i] *= tp[i]
		t2 += float64(wp[i]) * aw.gd[i]
		t3 += float64(tp[i]) * float64(hu[i]) * aw.gv[i]
	}
	return aw.dct.Energy(rp.weight.Km1, wp) - 2*t2 + 2*t3
}

// iterateJVP advances (f, u) to (fn, un). The f update performs the same
// float32 operations as iterate, so a plain GridEMS run of k iterations
// reproduces the k-th iterate here bit for bit.
//
// With wantRSS it returns the residual sum of squares of f over valid pixels
// (for the discrepancy stop), else 0.
func (g *GridEMS) iterateJVP(ws *Workspace, aw *autoWork, p *Problem, f, fn, u, un []float32, wantRSS bool) (rss float64) {
	w, h := p.W, p.H
	n := w * h
	b := p.Background
	g.H.Apply(&ws.conv, ws.p, f, w, h)
	g.H.Apply(&ws.conv, aw.hu, u, w, h)
	pp, q, d, m, hu, dq, delta := ws.p[:n], ws.q[:n], p.D[:n], p.Mask[:n], aw.hu[:n], aw.dq[:n], aw.delta[:n]
	if wantRSS {
		for i := range pp {
			if m[i] != 0 {
				e := float64(d[i] - pp[i] - b)
				rss += e * e
			}
		}
	}
	vec.RatioJVP(q, dq, pp, d, m, delta, hu, b)
	g.H.Adjoint(&ws.conv, ws.t, q, w, h)
	g.H.Adjoint(&ws.conv, aw.dt, dq, w, h)
	e, ue := fn, un
	if g.S != nil {
		e, ue = ws.p, aw.ue
	}
	t, s, dt := ws.t[:n], ws.s[:n], aw.dt[:n]
	e, ue = e[:n], ue[:n]
	vec.UpdateJVP(e, ue, f, u, t, dt, s, sensitivityFloor)
	if g.S != nil {
		g.S.Apply(&ws.conv, fn, e, w, h)
		g.S.Apply(&ws.conv, un, ue, w, h)
	}
	return rss
}
