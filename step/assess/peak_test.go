package assess

import (
	"errors"
	"math"
	"testing"
)

// The default peak of PSNR and SSIM and the data-range check.
// Source: the rules in Peak's documentation (README, "limpid assess").
func TestAssessPeakAndDataRange(t *testing.T) {
	ref := []float32{3, 10, 7, 100}
	valid := []bool{true, true, true, false}
	for _, c := range []struct {
		dtype string
		ref   []float32
		want  float64
	}{
		{"UInt16", ref, 65535},
		{"Byte", ref, 255},
		{"Float32", ref, 7},
		{"Float32", []float32{5, 5, 5, 9}, 1},
	} {
		if got := Peak(c.dtype, c.ref, valid); got != c.want {
			t.Errorf("%s %v: peak %g, want %g", c.dtype, c.ref, got, c.want)
		}
	}
	for _, L := range []float64{1, 4095, 1e300} {
		if err := CheckDataRange(L); err != nil {
			t.Errorf("%g: %v", L, err)
		}
	}
	for _, L := range []float64{0, -1, math.NaN(), math.Inf(1)} {
		if err := CheckDataRange(L); !errors.Is(err, ErrDataRange) {
			t.Errorf("%g: %v, want a configuration error", L, err)
		}
	}
}
