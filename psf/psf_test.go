package psf

import (
	"errors"
	"math"
	"strings"
	"testing"
)

// Source: Poisson summation: a Gaussian point-sampled on the unit grid has
// discrete variance sigma^2 up to ~4 pi^2 sigma^2 exp(-2 pi^2 sigma^2)
// relative (derived); for sigma >= 1 that is below 1e-6. The truncation at
// 4 sigma removes 6e-5 of the mass from the tails (standard normal table),
// which lowers the variance by under 1e-3 relative.
func TestGaussianVariance(t *testing.T) {
	const tol = 2e-3
	for _, s := range []float64{1, 1.5, 2.5} {
		k, err := GaussianIso(s)
		if err != nil {
			t.Fatal(err)
		}
		vx, vy := k.Variance()
		if math.Abs(vx-s*s) > tol*s*s || math.Abs(vy-s*s) > tol*s*s || !k.Separable() {
			t.Errorf("sigma %g: variance (%g, %g), separable %v", s, vx, vy, k.Separable())
		}
	}
	// A rotated anisotropic Gaussian keeps the trace of its covariance.
	k, err := GaussianAniso(2, 1, 30)
	if err != nil {
		t.Fatal(err)
	}
	vx, vy := k.Variance()
	if math.Abs(vx+vy-5) > tol*5 || k.Separable() {
		t.Errorf("aniso: variances (%g, %g), separable %v", vx, vy, k.Separable())
	}
}

// Kernel validation. Source: NewKernel's documented contract (normalised,
// odd, no negative, NaN or zero-sum weights).
func TestNewKernelRefuses(t *testing.T) {
	cases := []struct {
		w, h int
		d    []float64
		want string
	}{
		{2, 1, []float64{1, 1}, "even"},
		{3, 1, []float64{1, -1, 1}, "negative"},
		{3, 1, []float64{0, math.NaN(), 0}, "not finite"},
		{3, 1, []float64{0, 0, 0}, "zero"},
		{3, 1, []float64{1, 1}, "does not match"},
	}
	for _, c := range cases {
		_, err := NewKernel(c.w, c.h, c.d)
		if err == nil || !errors.Is(err, ErrKernel) || !strings.Contains(err.Error(), c.want) {
			t.Errorf("%v: error %v, want %q", c.d, err, c.want)
		}
	}
	k, err := NewKernel(3, 1, []float64{1, 2, 1})
	if err != nil || math.Abs(k.Data[1]-0.5) > 1e-15 {
		t.Fatalf("normalisation: %v %v", k, err)
	}
}

// Weights whose float64 sum overflows (each near the largest float64,
// 1.8e308: IEEE 754 binary64) normalise like the same weights scaled down:
// a kernel is defined up to a positive factor. Source: NewKernel's contract
// (normalised to sum 1); IEEE 754-2008 for the float64 range.
func TestNewKernelHugeWeights(t *testing.T) {
	// Two roundings per weight (v/peak, then /sum) against one.
	const tol = 4e-16
	big, err := NewKernel(3, 3, []float64{1e308, 2e308 / 2, 1e308, 1e308, 1.5e308, 1e308, 1e308, 1e308, 1e308})
	if err != nil {
		t.Fatalf("1e308 weights: %v", err)
	}
	small, err := NewKernel(3, 3, []float64{1, 1, 1, 1, 1.5, 1, 1, 1, 1})
	if err != nil {
		t.Fatal(err)
	}
	var sum float64
	for i := range big.Data {
		sum += big.Data[i]
		if math.Abs(big.Data[i]-small.Data[i]) > tol {
			t.Errorf("weight %d: %g, want %g", i, big.Data[i], small.Data[i])
		}
	}
	if math.Abs(sum-1) > 9*tol {
		t.Errorf("weights sum to %g, want 1", sum)
	}
	// The largest float64 everywhere, and one such weight among zeros.
	for _, d := range [][]float64{{math.MaxFloat64, math.MaxFloat64, math.MaxFloat64}, {0, math.MaxFloat64, 0}} {
		k, err := NewKernel(3, 1, d)
		if err != nil {
			t.Fatalf("%v: %v", d, err)
		}
		var s float64
		for _, v := range k.Data {
			s += v
		}
		if math.Abs(s-1) > 3*tol || !(k.Data[1] > 0) {
			t.Errorf("%v: weights %v", d, k.Data)
		}
	}
	// Infinite, NaN and negative-only weights stay refused.
	for _, d := range [][]float64{{0, math.Inf(1), 0}, {-1, -2, -1}, {math.NaN(), 1, 1}} {
		if _, err := NewKernel(3, 1, d); !errors.Is(err, ErrKernel) {
			t.Errorf("%v: error %v, want ErrKernel", d, err)
		}
	}
}

func TestParseSpecs(t *testing.T) {
	for _, bad := range []string{"", "gaussian", "gaussian:", "gaussian:sigma", "gaussian:sigma=1,sigma=2", "gaussian:sx=1", "blob:r=1", "gaussian:foo=1", "kernel:"} {
		if _, err := Parse(bad, Env{}); err == nil {
			t.Errorf("%q accepted", bad)
		}
	}
	k, err := Parse("gaussian:sx=0.8,sy=0.6,angle=20", Env{})
	if err != nil || k.Separable() {
		t.Fatalf("aniso: %v", err)
	}
}
