package conv

import (
	"math"
	"math/rand/v2"
	"testing"
)

// Source: the DCT-II definition (Ahmed, Natarajan & Rao 1974), here through
// DCT2.Forward, which TestDCT2Definition checks against the definition in
// float64. The float32 FFT route (Makhoul 1980) must agree on every
// 2,3,5-smooth shape, odd and even, within dct32Tol of the largest
// coefficient: float32 rounding (2^-24) times the transform's depth
// (log2 of the size plus the pre/post-twiddles, under 32 operations).
const dct32Tol = 32 * 6e-8

func TestDCT32MatchesFloat64(t *testing.T) {
	r := rand.New(rand.NewPCG(5, 6))
	for _, sz := range [][2]int{{2, 2}, {3, 5}, {4, 9}, {15, 8}, {16, 16}, {25, 27}, {60, 45}, {256, 96}, {135, 144}} {
		w, h := sz[0], sz[1]
		src := make([]float32, w*h)
		for i := range src {
			src[i] = 1000 + 500*r.Float32()
		}
		want := make([]float64, w*h)
		NewDCT2(w, h).Forward(want, src)
		got := make([]float32, w*h)
		newDCT32(w, h).forward(got, src)
		peak := 0.0
		for _, v := range want {
			peak = math.Max(peak, math.Abs(v))
		}
		for i := range want {
			if d := math.Abs(float64(got[i]) - want[i]); d > dct32Tol*peak {
				t.Fatalf("%dx%d: coefficient (%d, %d) = %g, float64 DCT %g (difference %.3g of the peak)", w, h, i%w, i/w, got[i], want[i], d/peak)
			}
		}
	}
}

// Source: Parseval for an orthonormal transform, sum F^2 = sum x^2; with
// weights, the float64 transform's weighted sum. energyTol: the relative
// error of a sum of squares of coefficients each within dct32Tol of the
// peak (the sums are dominated by the large coefficients).
func TestEnergyMatchesFloat64(t *testing.T) {
	const energyTol = 1e-6
	r := rand.New(rand.NewPCG(7, 8))
	for _, sz := range [][2]int{{256, 256}, {180, 200}, {97, 64}} {
		w, h := sz[0], sz[1]
		src := make([]float32, w*h)
		zeros, wt := make([]float64, w*h), make([]float64, w*h)
		var sumsq float64
		for i := range src {
			src[i] = 2000 + 800*r.Float32()
			sumsq += float64(src[i]) * float64(src[i])
			wt[i] = r.Float64()
		}
		d := NewDCT2(w, h)
		if got := d.Energy(zeros, src); math.Abs(got-sumsq) > energyTol*sumsq {
			t.Errorf("%dx%d: sum F^2 = %.10g, sum x^2 = %.10g (Parseval)", w, h, got, sumsq)
		}
		f := make([]float64, w*h)
		d.Forward(f, src)
		var want float64
		for i, v := range f {
			want += wt[i] * v * v
		}
		wm1 := make([]float64, len(wt))
		for i := range wt {
			wm1[i] = wt[i] - 1
		}
		if got := d.Energy(wm1, src); math.Abs(got-want) > energyTol*want {
			t.Errorf("%dx%d: weighted energy %.10g, float64 transform %.10g", w, h, got, want)
		}
	}
}
