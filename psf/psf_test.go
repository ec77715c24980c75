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
