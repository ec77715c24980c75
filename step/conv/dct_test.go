package conv

import (
	"math"
	"math/rand/v2"
	"testing"

	"limpid/psf"
)

// Source: the definition of the orthonormal DCT-II (Ahmed, Natarajan & Rao
// 1974): X_k = a_k sum_j x_j cos(pi k (2j+1) / 2n), a_0 = sqrt(1/n),
// a_k = sqrt(2/n). Tolerance: float64 rounding over ~n^2 terms.
func TestDCT2Definition(t *testing.T) {
	const tol = 1e-9
	rng := rand.New(rand.NewPCG(5, 6))
	for _, sz := range [][2]int{{7, 5}, {16, 12}, {1, 9}} {
		w, h := sz[0], sz[1]
		x := make([]float32, w*h)
		for i := range x {
			x[i] = float32(rng.NormFloat64())
		}
		got := make([]float64, w*h)
		NewDCT2(w, h).Forward(got, x)
		ax, ay := dctScales(w), dctScales(h)
		for ky := 0; ky < h; ky++ {
			for kx := 0; kx < w; kx++ {
				var s float64
				for j := 0; j < h; j++ {
					for i := 0; i < w; i++ {
						s += float64(x[j*w+i]) * math.Cos(math.Pi*float64(kx*(2*i+1))/float64(2*w)) * math.Cos(math.Pi*float64(ky*(2*j+1))/float64(2*h))
					}
				}
				s *= ax[kx] * ay[ky]
				if math.Abs(s-got[ky*w+kx]) > tol {
					t.Fatalf("%dx%d: X[%d,%d] = %g, want %g", w, h, kx, ky, got[ky*w+kx], s)
				}
			}
		}
		back := make([]float64, w*h)
		NewDCT2(w, h).Inverse(back, got)
		for i := range back {
			if math.Abs(back[i]-float64(x[i])) > tol {
				t.Fatalf("%dx%d: inverse differs at %d: %g vs %g", w, h, i, back[i], x[i])
			}
		}
	}
}

// Source: Martucci, "Symmetric convolution and the discrete sine and cosine
// transforms", IEEE TSP 42(5):1038, 1994: the DCT-II basis vectors are the
// eigenvectors of a symmetric convolution with half-sample symmetric
// extension, eigenvalue kappa_0 + 2 sum_j kappa_j cos(pi k j / n). The
// project's convolution (Conv.Apply) must agree to float32 rounding.
func TestDCTDiagonalisesSymmetricPSF(t *testing.T) {
	const w, h = 40, 32
	const tol = 2e-5 // float32 convolution of O(1) values
	k, _ := psf.GaussianAniso(1.3, 0.8, 0)
	H := New(k)
	rng := rand.New(rand.NewPCG(7, 8))
	x := make([]float32, w*h)
	for i := range x {
		x[i] = float32(rng.Float64())
	}
	hx := make([]float32, w*h)
	var cw Work
	H.Apply(&cw, hx, x, w, h)
	d := NewDCT2(w, h)
	X, HX := make([]float64, w*h), make([]float64, w*h)
	d.Forward(X, x)
	d.Forward(HX, hx)
	lam, ok := Eigenvalues(k, w, h)
	if !ok {
		t.Fatal("a symmetric Gaussian was not found DCT-diagonal")
	}
	for i := range X {
		if math.Abs(HX[i]-lam[i]*X[i]) > tol {
			t.Fatalf("coefficient %d: DCT(Hx) = %g, eigenvalue x DCT(x) = %g", i, HX[i], lam[i]*X[i])
		}
	}
	skew := &psf.Kernel{W: 3, H: 3, Data: []float64{0, 0, 0, 0, 0.5, 0.5, 0, 0, 0}}
	if _, ok := Eigenvalues(skew, w, h); ok {
		t.Fatal("an asymmetric kernel was called DCT-diagonal")
	}
}
