package psf

import (
	"math"
	"math/rand/v2"
	"testing"
)

// SceneNoise and pixelNoise are one estimator: on a smooth ramp plus white
// Gaussian noise both recover the noise sigma, and on the same pixels
// (fewer than 512 rows: every row) they agree to the bit whether the plane
// is float32 or float64; NaN pixels are skipped.
// Source: the MAD's normal consistency factor 1.4826 (Rousseeuw & Croux,
// JASA 88:1273, 1993) and the second difference's variance 6 sigma^2 for
// white noise (derived: 1 + 4 + 1). tolNoise: the MAD sigma of n values has
// a relative standard error near 1.17 / sqrt(n) (its asymptotic efficiency
// is 37 %); n = 254 x 256 second differences give about 0.5 %, and 2 %
// allows about 4 standard errors with room for the differences'
// correlation.
func TestSecondDiffNoise(t *testing.T) {
	const tolNoise = 0.02
	const w, h, sigma = 256, 256, 5.0
	rng := rand.New(rand.NewPCG(6, 1))
	p32 := make([]float32, w*h)
	p64 := make([]float64, w*h)
	for i := range p32 {
		x, y := float64(i%w), float64(i/w)
		p32[i] = float32(1000 + 2*x - 3*y + sigma*rng.NormFloat64())
		p64[i] = float64(p32[i])
	}
	got := SceneNoise(p32, w, h)
	if math.Abs(got-sigma) > tolNoise*sigma {
		t.Errorf("noise %.4f, want %g", got, sigma)
	}
	if p := pixelNoise(p64, w, h); p != got {
		t.Errorf("pixelNoise %v, SceneNoise %v on the same pixels", p, got)
	}
	for i := 0; i < w; i += 3 {
		p32[100*w+i] = float32(math.NaN())
	}
	if n := SceneNoise(p32, w, h); math.IsNaN(n) || math.Abs(n-sigma) > tolNoise*sigma {
		t.Errorf("with NaN pixels: noise %g", n)
	}
	if n := SceneNoise(make([]float32, 2*5), 2, 5); !math.IsNaN(n) {
		t.Errorf("no second difference: %g, want NaN", n)
	}
}

// solveLinear solves a system that needs a row exchange, and refuses a
// singular one. Source: the system below, solved by hand: x = (1, -2, 3).
// tolSolve: a few units in the last place of values near 1.
func TestSolveLinear(t *testing.T) {
	const tolSolve = 1e-14
	m := [][]float64{
		{0, 2, 1, -1},  // 2y + z = -1
		{1, 1, 1, 2},   // x + y + z = 2
		{2, -1, 3, 13}, // 2x - y + 3z = 13
	}
	x, ok := solveLinear(m, 1e-12)
	want := []float64{1, -2, 3}
	if !ok {
		t.Fatal("refused a regular system")
	}
	for i := range want {
		if math.Abs(x[i]-want[i]) > tolSolve {
			t.Errorf("x[%d] = %.17g, want %g", i, x[i], want[i])
		}
	}
	sing := augmented(2)
	sing[0][0], sing[0][1], sing[1][0], sing[1][1] = 1, 2, 2, 4
	if _, ok := solveLinear(sing, 1e-12); ok {
		t.Error("solved a singular system")
	}
}

// golden finds the minimum of a smooth unimodal function. Source: the
// parabola (x - 1.7)^2 + 3 has its minimum at 1.7 (by construction).
// tolGolden: a minimum can be located only to about sqrt(machine epsilon)
// times the scale, 1.5e-8 x 1.7 x sqrt(3) here, since within that distance
// f changes by less than a rounding unit (Press et al., Numerical Recipes,
// 3rd ed., sec. 10.1). The calls are the 61 of the scan, 2 to start and at
// most 100 iterations.
func TestGolden(t *testing.T) {
	const tolGolden = 1e-7
	calls := 0
	got := golden(func(x float64) float64 { calls++; return (x-1.7)*(x-1.7) + 3 }, 0.05, 20)
	if math.Abs(got-1.7) > tolGolden || calls > 61+2+100 {
		t.Errorf("minimum at %.12g after %d calls, want 1.7", got, calls)
	}
}
