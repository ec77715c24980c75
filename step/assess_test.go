package step

import (
	"encoding/json"
	"limpid/step/conv"
	"math"
	"math/rand/v2"
	"os"
	"testing"
)

// TestQualityAgainstSkimage compares step.SSIM and step.PSNR with
// scikit-image on committed vectors.
// Source: scikit-image 0.19.3 (Debian python3-skimage),
// skimage.metrics.structural_similarity(gaussian_weights=True, sigma=1.5,
// use_sample_covariance=False, data_range=L) and peak_signal_noise_ratio,
// through testdata/ref/make_quality_reference.py run with /usr/bin/python3.
func TestQualityAgainstSkimage(t *testing.T) {
	b, err := os.ReadFile("../testdata/ref/quality_skimage.json")
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
// with K1 = 0.01; check value L = 255, (100, 110) -> 0.9954764 (GUIDE
// section 2).
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
	a := Assess(ref, ref, ref, valid, w, h, L)
	if !math.IsInf(a.PSNR, 1) || a.SSIM != 1 || a.RMSE != 0 || a.MAE != 0 || a.Bias != 0 || a.FluxChange != 0 {
		t.Errorf("identical: %+v", a)
	}
	if a.Edges == 0 || math.Abs(a.SharpnessGain-1) > 1e-12 || a.RingingObserved != a.RingingRestored {
		t.Errorf("identical: edges %d, gain %g, ringing %g/%g", a.Edges, a.SharpnessGain, a.RingingObserved, a.RingingRestored)
	}
	// Offset c = 10.
	off := make([]float32, w*h)
	for i, v := range ref {
		off[i] = v + 10
	}
	a = Assess(ref, off, ref, valid, w, h, L)
	// Tolerance: float32 storage of values near 2400 (ulp 2.4e-4) in the
	// offset image.
	const offTol = 5e-4
	if math.Abs(a.RMSE-10) > offTol || math.Abs(a.MAE-10) > offTol || math.Abs(a.Bias-10) > offTol ||
		math.Abs(a.PSNR-20*math.Log10(L/10)) > 1e-3 {
		t.Errorf("offset 10: %+v", a)
	}
	// Pure Gaussian noise, sigma 12.
	const s = 12.0
	rng := rand.New(rand.NewPCG(3, 4))
	noisy := make([]float32, w*h)
	for i, v := range ref {
		noisy[i] = v + float32(s*rng.NormFloat64())
	}
	a = Assess(ref, noisy, ref, valid, w, h, L)
	n := float64(w * h)
	// Tolerances: 5 standard errors of the sample statistics for n pixels
	// (sd of the RMSE about s/sqrt(2n), of the bias s/sqrt(n)).
	if math.Abs(a.RMSE-s) > 5*s/math.Sqrt(2*n) || math.Abs(a.Bias) > 5*s/math.Sqrt(n) {
		t.Errorf("noise %g: RMSE %g, bias %g", s, a.RMSE, a.Bias)
	}
	// The noise estimate: restored (noisy) near s, observed (noiseless
	// smooth scene) near 0. Tolerance 10 %: the MAD of a quarter of the
	// pixels has about 2 % sampling error here, and the smooth scene leaks
	// a little structure into the high-pass residual.
	if math.Abs(a.NoiseRestored-s) > 0.1*s || a.NoiseObserved > 0.1*s {
		t.Errorf("noise %g: estimated observed %g, restored %g (%s)", s, a.NoiseObserved, a.NoiseRestored, a.NoiseRule)
	}
}

// TestAssessSharpnessAndRinging: a sharper rendering of the same scene has a
// higher MTF50, and an unsharp-masked one rings by the analytic overshoot.
// Source: the Gaussian MTF (GUIDE section 2: MTF50 = 0.18739 / sigma for a
// Gaussian PSF, so halving the blur raises the MTF50); the ESF of a step
// blurred by N(0, a^2) is Phi(x / a), so 2 obs - G_b obs has the ESF
// 2 Phi(x / a) - Phi(x / sqrt(a^2 + b^2)), whose overshoot max_x(.) - 1 is
// the ringing indicator's exact value (derived).
func TestAssessSharpnessAndRinging(t *testing.T) {
	const w, h = 192, 160
	obs := smoothScene(w, h, 1.6)
	res := smoothScene(w, h, 0.8)
	valid := make([]bool, w*h)
	for i := range valid {
		valid[i] = true
	}
	a := Assess(obs, res, nil, valid, w, h, 0)
	if a.Edges == 0 || !(a.SharpnessGain > 1.3) {
		t.Fatalf("sharper: edges %d, MTF50 %g -> %g, gain %g", a.Edges, a.MTF50Observed, a.MTF50Restored, a.SharpnessGain)
	}
	if !math.IsNaN(a.PSNR) {
		t.Errorf("PSNR without a reference: %g", a.PSNR)
	}
	// Unsharp masking: 2 obs - blur(obs) overshoots.
	sharp := make([]float32, w*h)
	bl := make([]float32, w*h)
	var ws conv.Work
	conv.NewSeparable(conv.GaussianTaps(1.5), conv.GaussianTaps(1.5)).Apply(&ws, bl, obs, w, h)
	for i := range sharp {
		sharp[i] = 2*obs[i] - bl[i]
	}
	b := Assess(obs, sharp, nil, valid, w, h, 0)
	phi := func(x float64) float64 { return 0.5 * (1 + math.Erf(x/math.Sqrt2)) }
	want := 0.0
	for x := 0.0; x < 12; x += 1e-4 {
		want = math.Max(want, 2*phi(x/1.6)-phi(x/math.Hypot(1.6, 1.5))-1)
	}
	// Tolerance 0.003 of the step: the ESF is binned at 1/4 pixel (the peak
	// falls between bins) and the scene is point-sampled float32 (no noise).
	if math.Abs(b.RingingRestored-want) > 0.003 || !(b.RingingObserved < 0.003) {
		t.Errorf("unsharp mask: ringing observed %g, restored %g, analytic %g", b.RingingObserved, b.RingingRestored, want)
	}
	t.Logf("MTF50 %.4f -> %.4f (gain %.2f), ringing %.4f -> %.4f (unsharp %.4f, analytic %.4f)", a.MTF50Observed, a.MTF50Restored, a.SharpnessGain, a.RingingObserved, a.RingingRestored, b.RingingRestored, want)
}

// TestRingingStep: the indicator of an ideal ESF with a known overshoot.
// Source: the indicator's definition (README, "limpid assess").
func TestRingingStep(t *testing.T) {
	esf := make([]float64, 40)
	for i := range esf {
		if i >= 20 {
			esf[i] = 100
		}
	}
	esf[21] = 115 // 15 % overshoot of a step of 100
	esf[18] = -5  // 5 % undershoot
	if r := Ringing(esf); math.Abs(r-0.15) > 1e-12 {
		t.Errorf("Ringing = %g, want 0.15", r)
	}
	for i := range esf {
		esf[i] = -esf[i] // falling edge: same indicator
	}
	if r := Ringing(esf); math.Abs(r-0.15) > 1e-12 {
		t.Errorf("falling: Ringing = %g, want 0.15", r)
	}
}
