package simulate

import (
	"errors"
	"fmt"
	"math"
	"testing"

	"limpid/step"
)

// format writes n back in the text form ParseNoise reads (the round trip).
func format(n Noise) string {
	switch n.Kind {
	case NoisePoisson:
		return fmt.Sprintf("poisson:gain=%v,read=%v", n.Gain, n.Read)
	case NoiseGaussian:
		return fmt.Sprintf("gaussian:sigma=%v", n.Sigma)
	}
	return "none"
}

// FuzzParseNoise: a --noise specification is refused with a *Error (wrapping
// step.ErrConfig) or gives a model with finite parameters in [0, 1e12], a
// positive gain for poisson, finite non-negative variances, and the same
// model when written back and read again (%v prints the shortest decimal
// that reads back exactly: Go's strconv docs); never a panic.
func FuzzParseNoise(f *testing.F) {
	for _, s := range []string{
		"poisson:gain=0.4,read=3", "gaussian:sigma=5", "none", "none:x=1", "poisson:gain=0", "poisson:read=3",
		"gaussian:sigma=1e13", "gaussian:sigma=nan", "poisson:gain=1,gain=2", "laplace:b=1", "", ":", "gaussian:sigma",
	} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, spec string) {
		n, err := ParseNoise(spec)
		if err != nil {
			var e *Error
			if !errors.As(err, &e) || !errors.Is(err, step.ErrConfig) {
				t.Fatalf("%q: error %v is not a *Error wrapping ErrConfig", spec, err)
			}
			return
		}
		for _, v := range []float64{n.Gain, n.Read, n.Sigma} {
			if math.IsNaN(v) || v < 0 || v > 1e12 {
				t.Fatalf("%q: parameters %+v", spec, n)
			}
		}
		if n.Kind == NoisePoisson && !(n.Gain > 0) {
			t.Fatalf("%q: poisson with gain %g", spec, n.Gain)
		}
		for _, s := range []float64{-1, 0, 1e6} {
			if v := n.Variance(s); math.IsNaN(v) || math.IsInf(v, 0) || v < 0 {
				t.Fatalf("%q: variance %g at %g", spec, v, s)
			}
		}
		back, err := ParseNoise(format(n))
		if err != nil || back != n {
			t.Fatalf("%q -> %+v -> %q -> %+v, %v", spec, n, format(n), back, err)
		}
	})
}
