package step

import (
	"context"
	"math"
	"math/rand/v2"
	"testing"

	"limpid/psf"
	"limpid/raster"
	"limpid/step/conv"
	"limpid/step/internal/plane"
	"limpid/step/noise"
)

// ems64 is a float64 re-implementation of the EMS recursion and of its
// forward-mode derivative (derived by differentiating the recursion: the
// iterative risk estimate of Vonesch, Ramani & Unser, ICIP 2008), written
// independently of
// the production code (direct sums, explicit adjoint) so that finite
// differences can be taken at float64 precision.
type ems64 struct {
	w, h   int
	k      *psf.Kernel
	smooth []float64 // 1-D taps, nil = identity
}

func (e *ems64) apply(src []float64) []float64 {
	w, h, k := e.w, e.h, e.k
	dst := make([]float64, w*h)
	for y := 0; y < h; y++ {
		for x := 0; x < w; x++ {
			var s float64
			for dy := -k.Ry(); dy <= k.Ry(); dy++ {
				for dx := -k.Rx(); dx <= k.Rx(); dx++ {
					s += k.At(dx, dy) * src[raster.Mirror(y+dy, h)*w+raster.Mirror(x+dx, w)]
				}
			}
			dst[y*w+x] = s
		}
	}
	return dst
}

func (e *ems64) adjoint(src []float64) []float64 {
	w, h, k := e.w, e.h, e.k
	dst := make([]float64, w*h)
	for y := 0; y < h; y++ {
		for x := 0; x < w; x++ {
			for dy := -k.Ry(); dy <= k.Ry(); dy++ {
				for dx := -k.Rx(); dx <= k.Rx(); dx++ {
					dst[raster.Mirror(y+dy, h)*w+raster.Mirror(x+dx, w)] += k.At(dx, dy) * src[y*w+x]
				}
			}
		}
	}
	return dst
}

func (e *ems64) smoothing(src []float64) []float64 {
	if e.smooth == nil {
		return src
	}
	return conv.Blur64(src, e.w, e.h, e.smooth)
}

// run returns f_K and u_K = (d f_K / d d) delta from the flat start.
func (e *ems64) run(d, delta []float64, K int) (f, u []float64) {
	n := e.w * e.h
	var mean, dm float64
	for i := range d {
		mean += d[i]
		dm += delta[i]
	}
	f, u = make([]float64, n), make([]float64, n)
	for i := range f {
		f[i], u[i] = mean/float64(n), dm/float64(n)
	}
	ones := make([]float64, n)
	for i := range ones {
		ones[i] = 1
	}
	s := e.adjoint(ones)
	for k := 0; k < K; k++ {
		p, hu := e.apply(f), e.apply(u)
		q, dq := make([]float64, n), make([]float64, n)
		for i := range q {
			q[i] = d[i] / p[i]
			dq[i] = (delta[i] - q[i]*hu[i]) / p[i]
		}
		t, dt := e.adjoint(q), e.adjoint(dq)
		ef, eu := make([]float64, n), make([]float64, n)
		for i := range ef {
			ef[i] = f[i] * t[i] / s[i]
			eu[i] = (u[i]*t[i] + f[i]*dt[i]) / s[i]
		}
		f, u = e.smoothing(ef), e.smoothing(eu)
	}
	return f, u
}

func relDiff(a, b []float64) float64 {
	var num, den float64
	for i := range a {
		num += (a[i] - b[i]) * (a[i] - b[i])
		den += b[i] * b[i]
	}
	return math.Sqrt(num / den)
}

// float32JVP runs K iterations of the production derivative-carrying EMS
// iteration (iterateJVP) on p from the flat start with probe delta, and
// returns f_K and u_K.
func float32JVP(g *GridEMS, p *Problem, delta []float64, K int) ([]float32, []float64) {
	w, h, n := p.W, p.H, p.W*p.H
	var ws Workspace
	aw := &autoWork{}
	aw.reset(w, h)
	for i := range delta {
		aw.delta[i] = float32(delta[i])
	}
	ws.reset(n)
	var mean, dmean float64
	for i := range p.D {
		mean += float64(p.D[i])
		dmean += delta[i]
	}
	f, fn, uu, un := aw.f, aw.fn, aw.u, aw.un
	for i := range f {
		f[i], uu[i] = float32(mean/float64(n)), float32(dmean/float64(n))
	}
	g.H.Adjoint(&ws.conv, ws.s, p.Mask, w, h)
	for it := 0; it < K; it++ {
		g.iterateJVP(&ws, aw, p, f, fn, uu, un, false)
		f, fn, uu, un = fn, f, un, uu
	}
	u := make([]float64, n)
	for i := range u {
		u[i] = float64(uu[i])
	}
	return f, u
}

// Source: the definition of the derivative (central finite differences of
// the EMS recursion; forward-mode formulas derived as in Vonesch, Ramani &
// Unser, ICIP 2008). Acceptance bar (project requirement): relative 1e-6;
// central differences with step 1e-3 DN on data of ~100 DN have truncation
// error ~1e-9 and rounding ~1e-10.
func TestJVPFiniteDifferences(t *testing.T) {
	const w, h, K = 14, 12, 8
	const tolFD = 1e-6
	// The production recursion runs in float32: agreement with the float64
	// one is limited by float32 rounding growing over K iterations.
	const tolF32 = 2e-4
	k, _ := psf.GaussianIso(1.1)
	rng := rand.New(rand.NewPCG(11, 12))
	n := w * h
	d, delta := make([]float64, n), make([]float64, n)
	for i := range d {
		d[i] = 60 + 80*rng.Float64()
		delta[i] = float64(2*rng.IntN(2) - 1)
	}
	for _, eps := range []float64{0, 0.5, 0.7} {
		e := &ems64{w: w, h: h, k: k, smooth: conv.SmoothingKernel(eps)}
		_, u := e.run(d, delta, K)
		const step = 1e-3
		dp, dm := make([]float64, n), make([]float64, n)
		for i := range d {
			dp[i], dm[i] = d[i]+step*delta[i], d[i]-step*delta[i]
		}
		fp, _ := e.run(dp, delta, K)
		fm, _ := e.run(dm, delta, K)
		fd := make([]float64, n)
		for i := range fd {
			fd[i] = (fp[i] - fm[i]) / (2 * step)
		}
		if r := relDiff(u, fd); r > tolFD {
			t.Errorf("eps %g: forward-mode derivative vs finite differences: relative %.2e > %.0e", eps, r, tolFD)
		}
		// The production float32 iteration against the float64 one.
		g := &GridEMS{H: conv.New(k)}
		if sk := conv.SmoothingKernel(eps); sk != nil {
			g.S = conv.NewSeparable(sk, sk)
		}
		p := &Problem{D: make([]float32, n), Mask: ones(n), W: w, H: h}
		for i := range d {
			p.D[i] = float32(d[i])
		}
		f, got := float32JVP(g, p, delta, K)
		if r := relDiff(got, u); r > tolF32 {
			t.Errorf("eps %g: float32 derivative vs float64: relative %.2e > %.0e", eps, r, tolF32)
		}
		// And the f update is the plain EMS one, bit for bit.
		plain := make([]float32, n)
		g.Iterations = K
		if _, err := g.Solve(context.Background(), &Workspace{}, &Problem{D: append([]float32(nil), p.D...), Mask: ones(n), W: w, H: h}, plain); err != nil {
			t.Fatal(err)
		}
		for i := range plain {
			if plain[i] != f[i] {
				t.Fatalf("eps %g: the derivative-carrying iteration changed f at %d: %g vs %g", eps, i, f[i], plain[i])
			}
		}
	}
}

// Source: Stein's lemma (Stein, Ann. Statist. 9(6):1135, 1981) as used by
// SURE-type estimates (Ramani, Blu & Unser, IEEE TIP 17(9), 2008): under
// Gaussian noise of known variance, E[R_k] equals the true weighted error
// ||Q(f_k - x)||^2 - ||Q x||^2 on a full tile, and on a tile with invalid
// pixels (a 3-pixel collar on two sides and scattered holes) the masked
// form's ||K^(1/2) W H (f_k - x)||^2 - ||K^(1/2) W H x||^2, W the tapered
// mask (riskProblem.maskedRisk, plane.Taper). The mean difference over independent noise
// draws (and probes) must be within 3.5 standard errors of zero (a
// two-sided false-alarm rate of about 5e-4 per checked k). Power: without
// the divergence term the same draws are 10 and 22 standard errors off at
// k = 4 and 12 (full tile), so the check does see a missing or wrong
// derivative.
func TestRiskUnbiasedGaussian(t *testing.T) {
	const w, h, draws, K = 32, 32, 160, 12
	const sigma = 4.0
	const zMax = 3.5
	k, _ := psf.GaussianIso(1.2)
	H := conv.New(k)
	n := w * h
	x := make([]float32, n)
	for y := 0; y < h; y++ {
		for xx := 0; xx < w; xx++ {
			v := 120 + 40*math.Sin(float64(xx)/3)*math.Cos(float64(y)/5)
			if xx > 18 && y > 10 && y < 24 {
				v += 60
			}
			x[y*w+xx] = float32(v)
		}
	}
	hx := make([]float32, n)
	var cw conv.Work
	H.Apply(&cw, hx, x, w, h)
	rw, ok := newRiskWeights(k, w, h)
	if !ok {
		t.Fatal("Gaussian PSF not DCT-diagonal")
	}
	dct := conv.NewDCT2(w, h)
	collar := ones(n)
	for i := range collar {
		if xx, y := i%w, i/w; xx < 3 || y < 3 || (xx*7+y*13)%37 == 0 {
			collar[i] = 0
		}
	}
	for _, mc := range []struct {
		name string
		mask []float32
	}{{"full", ones(n)}, {"masked", collar}} {
		t.Run(mc.name, func(t *testing.T) {
			masked := mc.name == "masked"
			// The true error's fixed parts: Q x (full) or W H x (masked).
			X, WHx := make([]float64, n), make([]float32, n)
			dct.Forward(X, x)
			tp := make([]float32, n)
			plane.Taper(tp, mc.mask, w, h, plane.TaperRadius(rw.Radius), make([]float32, n), make([]float32, n))
			for i := range WHx {
				WHx[i] = hx[i] * tp[i]
			}
			WX := make([]float64, n)
			dct.Forward(WX, WHx)
			nm := &noise.Model{B: sigma * sigma, Floor: 1e-6}
			rng := rand.New(rand.NewPCG(13, 14))
			diff := make([][]float64, K)
			g := &GridEMS{H: H}
			ws, aw := &Workspace{}, &autoWork{}
			Fk := make([]float64, n)
			Pk := make([]float32, n)
			for m := 0; m < draws; m++ {
				d := make([]float32, n)
				for i := range d {
					d[i] = hx[i] + float32(sigma*rng.NormFloat64())
				}
				p := &Problem{D: d, Mask: mc.mask, W: w, H: h, Key: TileKey{Col: m}}
				rp := setupRisk(aw, p, nm, rw, 1, 1)
				run, err := runRisk(context.Background(), ws, aw, rp, g, K, false, false, math.Inf(1))
				if err != nil {
					t.Fatal(err)
				}
				// True error of every iterate f_k, k = 1..K, of a plain
				// solve (Observe sees the iterate a k-iteration solve
				// returns).
				plain := &GridEMS{H: H, Iterations: K, Observe: func(kk int, f []float32, _ float64) {
					var tr float64
					if masked {
						H.Apply(&cw, Pk, f, w, h)
						for i := range Pk {
							Pk[i] *= tp[i]
						}
						dct.Forward(Fk, Pk)
						for i := range Fk {
							tr += rw.K[i] * (Fk[i]*Fk[i] - 2*Fk[i]*WX[i])
						}
					} else {
						dct.Forward(Fk, f)
						for i := range Fk {
							tr += rw.Q2[i] * (Fk[i]*Fk[i] - 2*Fk[i]*X[i])
						}
					}
					diff[kk-1] = append(diff[kk-1], run.Risk[kk-1]-tr)
				}}
				if _, err := plain.Solve(context.Background(), &Workspace{}, &Problem{D: append([]float32(nil), d...), Mask: mc.mask, W: w, H: h}, make([]float32, n)); err != nil {
					t.Fatal(err)
				}
			}
			for _, kk := range []int{1, 4, 12} {
				v := diff[kk-1]
				var mu, s2 float64
				for _, e := range v {
					mu += e
				}
				mu /= float64(len(v))
				for _, e := range v {
					s2 += (e - mu) * (e - mu)
				}
				se := math.Sqrt(s2 / float64(len(v)-1) / float64(len(v)))
				t.Logf("k=%d: mean(R - true) = %.1f, standard error %.1f", kk, mu, se)
				if math.Abs(mu) > zMax*se {
					t.Errorf("k=%d: risk estimate biased: mean difference %.1f is %.1f standard errors from 0", kk, mu, math.Abs(mu)/se)
				}
			}
		})
	}
}
