package assess

import (
	"encoding/json"
	"limpid/step/conv"
	"math"
	"math/rand/v2"
	"os"
	"testing"

	"limpid/psf"
)

// TestQualityAgainstSkimage compares step.SSIM and step.PSNR with
// scikit-image on committed vectors.
// Source: scikit-image 0.19.3 (Debian python3-skimage),
// skimage.metrics.structural_similarity(gaussian_weights=True, sigma=1.5,
// use_sample_covariance=False, data_range=L) and peak_signal_noise_ratio,
// through testdata/ref/make_quality_reference.py run with /usr/bin/python3.
func TestQualityAgainstSkimage(t *testing.T) {
	b, err := os.ReadFile("../../testdata/ref/quality_skimage.json")
	if err != nil {
		t.Fatal(err)
	}
	var ref struct {
		Cases []struct {
			Name          string
			Width, Height int
			L             float64
			Ref, Img      []float64
			SSIM, PSNR    float64
		}
	}
	if err := json.Unmarshal(b, &ref); err != nil {
		t.Fatal(err)
	}
	if len(ref.Cases) < 3 {
		t.Fatalf("%d cases", len(ref.Cases))
	}
	// Tolerances: both sides compute in float64 from the same float32
	// values; scikit-image's Gaussian filter (truncate 3.5 -> radius 5, the
	// same 11 taps) sums in another order, so agreement to ~1e-12 is
	// expected; 1e-9 leaves room for summation order over the map.
	const ssimTol, psnrTol = 1e-9, 1e-9
	for _, c := range ref.Cases {
		r, m := make([]float32, len(c.Ref)), make([]float32, len(c.Img))
		for i := range r {
			r[i], m[i] = float32(c.Ref[i]), float32(c.Img[i])
		}
		s := SSIM(r, m, nil, c.Width, c.Height, c.L)
		p := PSNR(r, m, nil, c.L)
		if math.Abs(s-c.SSIM) > ssimTol {
			t.Errorf("%s: SSIM %.12f, scikit-image %.12f", c.Name, s, c.SSIM)
		}
		if math.Abs(p-c.PSNR) > psnrTol {
			t.Errorf("%s: PSNR %.12f, scikit-image %.12f", c.Name, p, c.PSNR)
		}
	}
}

// TestSSIMConstantImages: constant images a, b give SSIM (2ab + C1) / (a^2 +
// b^2 + C1) (the contrast/structure term is C2/C2 = 1).
// Source: Wang, Bovik, Sheikh & Simoncelli, IEEE TIP 13(4):600, 2004, eq. 13
// with K1 = 0.01; check value L = 255, (100, 110) -> 0.9954764 (derived:
// C1 = (0.01 x 255)^2 = 6.5025, (22000 + C1) / (22100 + C1) = 0.99547644).
func TestSSIMConstantImages(t *testing.T) {
	const w, h = 24, 20
	a, b := make([]float32, w*h), make([]float32, w*h)
	for i := range a {
		a[i], b[i] = 100, 110
	}
	// Tolerance: the check value has 7 decimals.
	const tol = 5e-8
	if got := SSIM(a, b, nil, w, h, 255); math.Abs(got-0.9954764) > tol {
		t.Errorf("SSIM = %.8f, want 0.9954764", got)
	}
}

// smoothScene is an invented smooth plane (a ramp and a slow wave) with a
// slanted bright rectangle (edges for the e-SFR), blurred.
func smoothScene(w, h int, blur float64) []float32 {
	p := make([]float32, w*h)
	c, s := math.Cos(5*math.Pi/180), math.Sin(5*math.Pi/180)
	for y := 0; y < h; y++ {
		for x := 0; x < w; x++ {
			v := 800 + 2*float64(x) + 100*math.Sin(float64(y)/40)
			u, q := c*float64(x-w/2)+s*float64(y-h/2), -s*float64(x-w/2)+c*float64(y-h/2)
			if math.Abs(u) < 40 && math.Abs(q) < 40 {
				v += 1500
			}
			p[y*w+x] = float32(v)
		}
	}
	if blur > 0 {
		out := make([]float32, w*h)
		var ws conv.Work
		conv.NewSeparable(conv.GaussianTaps(blur), conv.GaussianTaps(blur)).Apply(&ws, out, p, w, h)
		return out
	}
	return p
}

// TestAssessKnownAnswers checks assess on pairs whose answer is known.
// Source: the metric definitions (RMSE, MAE, bias, PSNR = 10 log10(L^2/MSE),
// Wang et al. 2004 SSIM) applied to identical images, a pure offset c
// (RMSE = MAE = bias = c, PSNR = 20 log10(L / c)) and pure Gaussian noise of
// sigma s (RMSE -> s, bias -> 0, and the added noise is what the noise
// estimate must see, Immerkaer 1996: the mask's residual of white noise has
// variance 36 s^2, scaled by 1/6).
func TestAssessKnownAnswers(t *testing.T) {
	const w, h, L = 192, 160, 4095.0
	ref := smoothScene(w, h, 1.0)
	valid := make([]bool, w*h)
	for i := range valid {
		valid[i] = true
	}
	// Identical.
	a := Measure(ref, ref, ref, valid, w, h, L)
	if !math.IsInf(a.Restored.PSNR, 1) || a.Restored.SSIM != 1 || a.Restored.RMSE != 0 || a.Restored.MAE != 0 || a.Restored.Bias != 0 || a.FluxChange != 0 {
		t.Errorf("identical: %+v", a)
	}
	// The same edges measured twice: the gain is 1 up to float64 rounding
	// of one division.
	const gainTol = 1e-12
	if a.Edges == 0 || math.Abs(a.SharpnessGain-1) > gainTol || a.RingingObserved != a.RingingRestored {
		t.Errorf("identical: edges %d, gain %g, ringing %g/%g", a.Edges, a.SharpnessGain, a.RingingObserved, a.RingingRestored)
	}
	// Offset c = 10.
	off := make([]float32, w*h)
	for i, v := range ref {
		off[i] = v + 10
	}
	a = Measure(ref, off, ref, valid, w, h, L)
	// Tolerance: float32 storage of values near 2400 (ulp 2.4e-4) in the
	// offset image; the PSNR's error is 20 log10(e) offTol / 10 = 4.3e-4 dB
	// of that (derived), bounded by psnrTol.
	const offTol, psnrTol = 5e-4, 1e-3
	if math.Abs(a.Restored.RMSE-10) > offTol || math.Abs(a.Restored.MAE-10) > offTol || math.Abs(a.Restored.Bias-10) > offTol ||
		math.Abs(a.Restored.PSNR-20*math.Log10(L/10)) > psnrTol {
		t.Errorf("offset 10: %+v", a)
	}
	// Side by side: OBSERVED is the reference itself (RMSE 0, PSNR
	// infinite), so the gain in RMSE is the offset and the PSNR gain is not
	// measurable.
	if g := a.Restored.Gain(a.Observed); a.Observed.RMSE != 0 || !math.IsInf(a.Observed.PSNR, 1) || a.Observed.SSIM != 1 ||
		math.Abs(g.RMSE-10) > offTol || !math.IsNaN(g.PSNR) {
		t.Errorf("offset 10, observed = reference: observed %+v, gain %+v", a.Observed, g)
	}
	// Pure Gaussian noise, sigma 12.
	const s = 12.0
	rng := rand.New(rand.NewPCG(3, 4))
	noisy := make([]float32, w*h)
	for i, v := range ref {
		noisy[i] = v + float32(s*rng.NormFloat64())
	}
	a = Measure(ref, noisy, ref, valid, w, h, L)
	n := float64(w * h)
	// Tolerances: nSE standard errors of the sample statistics for n
	// pixels (sd of the RMSE about s/sqrt(2n), of the bias s/sqrt(n)); a
	// normal deviate beyond 5 has probability 6e-7.
	const nSE = 5
	if math.Abs(a.Restored.RMSE-s) > nSE*s/math.Sqrt(2*n) || math.Abs(a.Restored.Bias) > nSE*s/math.Sqrt(n) {
		t.Errorf("noise %g: RMSE %g, bias %g", s, a.Restored.RMSE, a.Restored.Bias)
	}
	// The noise estimate: restored (noisy) near s, observed (noiseless
	// smooth scene) near 0. Tolerance 10 %: the MAD of a quarter of the
	// pixels has about 2 % sampling error here, and the smooth scene leaks
	// a little structure into the high-pass residual.
	const noiseTol = 0.1
	if math.Abs(a.NoiseRestored-s) > noiseTol*s || a.NoiseObserved > noiseTol*s {
		t.Errorf("noise %g: estimated observed %g, restored %g (%s)", s, a.NoiseObserved, a.NoiseRestored, a.NoiseRule)
	}
}

// edgeMTF50 is the MTF50 that the e-SFR of psf.MeasureEdge must give for a
// point-sampled step blurred by the discrete taps g (derived). Along the
// edge normal such an edge's ESF is the staircase sum_k g(k) H(d - k), so
// its LSF is the comb sum_k g(k) delta(d - k), whose transform below Nyquist
// is the DTFT of g. MeasureEdge multiplies the LSF by a Hamming window
// 0.54 + 0.46 cos(2 pi x / L) centred on it (L = max(psf.HammingMinPixels,
// psf.HammingFWHM x FWHM) pixels), so the e-SFR is
// |sum_k g(k) w(k) cos(2 pi f k)| / sum_k g(k) w(k); MTF50 is its first
// crossing of 0.5 (found by bisection: it falls monotonically from 1 for a
// Gaussian g).
func edgeMTF50(g []float64, sigma float64) float64 {
	L := math.Max(psf.HammingMinPixels, psf.HammingFWHM*2.35482*sigma) // FWHM = 2.35482 sigma
	r := (len(g) - 1) / 2
	sfr := func(f float64) float64 {
		var s, s0 float64
		for i, v := range g {
			k := float64(i - r)
			wv := v * (0.54 + 0.46*math.Cos(2*math.Pi*k/L))
			s += wv * math.Cos(2*math.Pi*f*k)
			s0 += wv
		}
		return s / s0
	}
	lo, hi := 0.0, 0.5
	for i := 0; i < 60; i++ {
		if mid := (lo + hi) / 2; sfr(mid) > 0.5 {
			lo = mid
		} else {
			hi = mid
		}
	}
	return (lo + hi) / 2
}

// TestAssessSharpnessAndRinging: a sharper rendering of the same scene has
// the MTF50 its blur implies, and an unsharp-masked one rings by the
// analytic overshoot.
// Source: the ISO 12233 e-SFR (psf.MeasureEdge) of an edge blurred by a
// known kernel, derived in edgeMTF50: 0.12783 cycles/pixel for the scene's
// sigma 1.6 taps and 0.23989 for sigma 0.8, a gain of 1.877 (the bare
// Gaussian MTF50 0.18739 / sigma would give 2: the 16-pixel Hamming window
// narrows the wider LSF more). The ESF of a step blurred by N(0, a^2) is
// Phi(x / a), so 2 obs - G_b obs has the ESF 2 Phi(x / a) - Phi(x /
// sqrt(a^2 + b^2)), whose overshoot max_x(.) - 1 is the ringing indicator's
// exact value (derived).
func TestAssessSharpnessAndRinging(t *testing.T) {
	const w, h = 192, 160
	// Relative tolerance of each MTF50 against the derivation: the
	// 1/4-pixel ESF bins, the derivative's correction and the scene's slow
	// background (ramp and wave, removed from the LSF tails) are not in it;
	// measured 0.2 % (0.1281 and 0.2399). A blur 5 % off moves the MTF50 by
	// 5 %.
	const mtf50Tol = 0.01
	obs := smoothScene(w, h, 1.6)
	res := smoothScene(w, h, 0.8)
	valid := make([]bool, w*h)
	for i := range valid {
		valid[i] = true
	}
	a := Measure(obs, res, nil, valid, w, h, 0)
	wantO, wantR := edgeMTF50(conv.GaussianTaps(1.6), 1.6), edgeMTF50(conv.GaussianTaps(0.8), 0.8)
	if a.Edges == 0 || math.Abs(a.MTF50Observed/wantO-1) > mtf50Tol || math.Abs(a.MTF50Restored/wantR-1) > mtf50Tol ||
		math.Abs(a.SharpnessGain/(wantR/wantO)-1) > 2*mtf50Tol {
		t.Fatalf("sharper: edges %d, MTF50 %.4f -> %.4f (gain %.3f), want %.4f -> %.4f (gain %.3f)",
			a.Edges, a.MTF50Observed, a.MTF50Restored, a.SharpnessGain, wantO, wantR, wantR/wantO)
	}
	if !math.IsNaN(a.Restored.PSNR) {
		t.Errorf("PSNR without a reference: %g", a.Restored.PSNR)
	}
	// Unsharp masking: 2 obs - blur(obs) overshoots.
	sharp := make([]float32, w*h)
	bl := make([]float32, w*h)
	var ws conv.Work
	conv.NewSeparable(conv.GaussianTaps(1.5), conv.GaussianTaps(1.5)).Apply(&ws, bl, obs, w, h)
	for i := range sharp {
		sharp[i] = 2*obs[i] - bl[i]
	}
	b := Measure(obs, sharp, nil, valid, w, h, 0)
	phi := func(x float64) float64 { return 0.5 * (1 + math.Erf(x/math.Sqrt2)) }
	want := 0.0
	for x := 0.0; x < 12; x += 1e-4 {
		want = math.Max(want, 2*phi(x/1.6)-phi(x/math.Hypot(1.6, 1.5))-1)
	}
	// Tolerance 0.003 of the step: the ESF is binned at 1/4 pixel (the peak
	// falls between bins) and the scene is point-sampled float32 (no noise).
	const ringTol = 0.003
	if math.Abs(b.RingingRestored-want) > ringTol || !(b.RingingObserved < ringTol) {
		t.Errorf("unsharp mask: ringing observed %g, restored %g, analytic %g", b.RingingObserved, b.RingingRestored, want)
	}
	t.Logf("MTF50 %.4f -> %.4f (gain %.2f), ringing %.4f -> %.4f (unsharp %.4f, analytic %.4f)", a.MTF50Observed, a.MTF50Restored, a.SharpnessGain, a.RingingObserved, a.RingingRestored, b.RingingRestored, want)
}

// TestRingingStep: the indicator of an ideal ESF with a known overshoot.
// Checked against the indicator's definition (README, "limpid assess"), no
// outside source.
func TestRingingStep(t *testing.T) {
	esf := make([]float64, 40)
	for i := range esf {
		if i >= 20 {
			esf[i] = 100
		}
	}
	esf[21] = 115 // 15 % overshoot of a step of 100
	esf[18] = -5  // 5 % undershoot
	// 0.15 is 15 / 100 up to float64 rounding of one division.
	const ringTol = 1e-12
	if r := Ringing(esf); math.Abs(r-0.15) > ringTol {
		t.Errorf("Ringing = %g, want 0.15", r)
	}
	for i := range esf {
		esf[i] = -esf[i] // falling edge: same indicator
	}
	if r := Ringing(esf); math.Abs(r-0.15) > ringTol {
		t.Errorf("falling: Ringing = %g, want 0.15", r)
	}
}

// TestSideBySideAgainstSkimage: Measure's OBSERVED and RESTORED figures
// against the reference, over the same valid pixels (nodata holes with
// garbage under them), and their gain.
// Source: scikit-image 0.19.3 (Debian python3-skimage):
// peak_signal_noise_ratio and mean_squared_error on the valid pixels, the
// map of structural_similarity(gaussian_weights=True, sigma=1.5,
// use_sample_covariance=False, full=True) averaged over the pixels whose
// 11x11 window is valid, and numpy means for MAE and bias, through
// testdata/ref/make_assess_reference.py run with /usr/bin/python3.
func TestSideBySideAgainstSkimage(t *testing.T) {
	b, err := os.ReadFile("../../testdata/ref/assess_skimage.json")
	if err != nil {
		t.Fatal(err)
	}
	type fid struct{ PSNR, SSIM, RMSE, MAE, Bias float64 }
	var ref struct {
		Cases []struct {
			Name               string
			Width, Height      int
			L                  float64
			Ref, Obs, Res      []float64
			Valid              []int
			Observed, Restored fid
		}
	}
	if err := json.Unmarshal(b, &ref); err != nil {
		t.Fatal(err)
	}
	if len(ref.Cases) < 2 {
		t.Fatalf("%d cases", len(ref.Cases))
	}
	// Tolerances: both sides compute in float64 from the same float32
	// values and differ only in summation order (relative error ~1e-15
	// per sum over at most 2,000 pixels); 1e-9 relative leaves room.
	const relTol = 1e-9
	near := func(got, want float64) bool {
		return math.Abs(got-want) <= relTol*math.Max(1, math.Abs(want))
	}
	check := func(name, which string, got Fidelity, want fid) {
		t.Helper()
		if !near(got.PSNR, want.PSNR) || !near(got.SSIM, want.SSIM) || !near(got.RMSE, want.RMSE) ||
			!near(got.MAE, want.MAE) || !near(got.Bias, want.Bias) {
			t.Errorf("%s, %s: got %+v, scikit-image/numpy %+v", name, which, got, want)
		}
	}
	for _, c := range ref.Cases {
		n := c.Width * c.Height
		r, o, s, valid := make([]float32, n), make([]float32, n), make([]float32, n), make([]bool, n)
		for i := range r {
			r[i], o[i], s[i], valid[i] = float32(c.Ref[i]), float32(c.Obs[i]), float32(c.Res[i]), c.Valid[i] == 1
		}
		a := Measure(o, s, r, valid, c.Width, c.Height, c.L)
		check(c.Name, "observed", a.Observed, c.Observed)
		check(c.Name, "restored", a.Restored, c.Restored)
		g := a.Restored.Gain(a.Observed)
		check(c.Name, "gain", g, fid{c.Restored.PSNR - c.Observed.PSNR, c.Restored.SSIM - c.Observed.SSIM,
			c.Restored.RMSE - c.Observed.RMSE, c.Restored.MAE - c.Observed.MAE, c.Restored.Bias - c.Observed.Bias})
		// The two comparisons are one function applied to each image:
		// swapping OBSERVED and RESTORED swaps the figures exactly
		// (self-consistency, no outside source).
		sw := Measure(s, o, r, valid, c.Width, c.Height, c.L)
		if sw.Observed != a.Restored || sw.Restored != a.Observed {
			t.Errorf("%s: swapping the images gives %+v / %+v, want %+v / %+v", c.Name, sw.Observed, sw.Restored, a.Restored, a.Observed)
		}
	}
}

// TestGainNotMeasurable: an infinite PSNR (identical images) on either side
// has no finite gain; the other metrics still subtract. Source: IEEE 754
// (inf - inf is NaN, x - inf is -inf: neither is a measured difference);
// the project's rule that unmeasurable figures are null.
func TestGainNotMeasurable(t *testing.T) {
	o := Fidelity{PSNR: math.Inf(1), SSIM: 1, RMSE: 0, MAE: 0, Bias: 0}
	r := Fidelity{PSNR: 40, SSIM: 0.9, RMSE: 2, MAE: 1.5, Bias: -0.5}
	g := r.Gain(o)
	if !math.IsNaN(g.PSNR) || g.SSIM != r.SSIM-o.SSIM || g.RMSE != 2 || g.MAE != 1.5 || g.Bias != -0.5 {
		t.Errorf("gain %+v", g)
	}
	if g := o.Gain(r); !math.IsNaN(g.PSNR) {
		t.Errorf("gain from an infinite PSNR: %g", g.PSNR)
	}
	if g := noFidelity().Gain(r); !math.IsNaN(g.SSIM) || !math.IsNaN(g.RMSE) {
		t.Errorf("gain without a reference: %+v", g)
	}
}
