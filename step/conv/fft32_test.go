package conv

import (
	"math"
	"math/cmplx"
	"math/rand/v2"
	"testing"
)

// fftSizes covers every radix (4, 2, 3, 5) alone and mixed.
var fftSizes = []int{1, 2, 3, 4, 5, 6, 8, 9, 10, 12, 15, 16, 20, 25, 27, 30, 32, 45, 48, 60, 64, 75, 80, 90, 125, 128}

func randComplex(r *rand.Rand, n int) []complex64 {
	x := make([]complex64, n)
	for i := range x {
		x[i] = complex(float32(r.Float64()-0.5), float32(r.Float64()-0.5))
	}
	return x
}

// naiveDFT is the definition X[k] = sum_j x[j] exp(-+2 pi i j k / n) in
// complex128, for vector b of nb interleaved ones.
func naiveDFT(x []complex64, n, nb, b int, inverse bool) []complex128 {
	sign := -1.0
	if inverse {
		sign = 1
	}
	out := make([]complex128, n)
	for k := 0; k < n; k++ {
		var s complex128
		for j := 0; j < n; j++ {
			s += complex128(x[j*nb+b]) * cmplx.Exp(complex(0, sign*2*math.Pi*float64(j*k%n)/float64(n)))
		}
		out[k] = s
	}
	return out
}

// Source: definition of the DFT, X[k] = sum_j x[j] exp(-2 pi i j k / n)
// (Oppenheim & Schafer, "Discrete-Time Signal Processing", ch. 8; chapter
// recalled from memory), evaluated naively in complex128.
func TestFFT32MatchesDFT(t *testing.T) {
	// float32 FFT error grows like eps log2(n) times the rms of the output
	// (Gentleman & Sande 1966, recalled from memory); inputs in
	// [-0.5, 0.5) give an output rms of sqrt(n/6): the bound 8e-6 sqrt(n)
	// is 50 times 6e-8 * log2(128) * 0.41 sqrt(n).
	const tol = 8e-6
	r := rand.New(rand.NewPCG(11, 12))
	for _, n := range fftSizes {
		p := newPlan32(n)
		for _, nb := range []int{1, 3, 4} {
			for _, inv := range []bool{false, true} {
				x := randComplex(r, n*nb)
				a := append([]complex64(nil), x...)
				got := p.transform(a, make([]complex64, n*nb), nb, inv)
				for b := 0; b < nb; b++ {
					want := naiveDFT(x, n, nb, b, inv)
					for k := range want {
						if e := cmplx.Abs(complex128(got[k*nb+b]) - want[k]); e > tol*math.Sqrt(float64(n)) {
							t.Fatalf("n=%d nb=%d inverse=%v: X[%d] = %v, definition %v (error %g)", n, nb, inv, k, got[k*nb+b], want[k], e)
						}
					}
				}
			}
		}
	}
}

// Source: Parseval's theorem for the unnormalised DFT, sum |X|^2 = n sum |x|^2,
// and the unnormalised inverse of the forward transform is n times the input
// (Oppenheim & Schafer, "Discrete-Time Signal Processing", ch. 8; chapter
// recalled from memory).
func TestFFT32ParsevalAndInverse(t *testing.T) {
	// Sums of n float32 squares, accumulated in float64: relative 1e-5
	// covers the transform's float32 rounding (eps log2 n ~ 6e-7 per value).
	const tol = 1e-5
	r := rand.New(rand.NewPCG(13, 14))
	for _, n := range []int{60, 64, 240, 625, 640, 1000} {
		p := newPlan32(n)
		x := randComplex(r, n)
		a := append([]complex64(nil), x...)
		s := make([]complex64, n)
		f := p.transform(a, s, 1, false)
		var ex, ef float64
		for i := range x {
			ex += real(complex128(x[i]) * cmplx.Conj(complex128(x[i])))
			ef += real(complex128(f[i]) * cmplx.Conj(complex128(f[i])))
		}
		if math.Abs(ef-float64(n)*ex) > tol*ef {
			t.Errorf("n=%d: sum |X|^2 = %g, n sum |x|^2 = %g", n, ef, float64(n)*ex)
		}
		other := a
		if &f[0] == &a[0] {
			other = s
		}
		back := p.transform(f, other, 1, true)
		for i := range x {
			if e := cmplx.Abs(complex128(back[i])/complex(float64(n), 0) - complex128(x[i])); e > tol {
				t.Fatalf("n=%d: inverse(forward(x))/n at %d = %v, x = %v", n, i, back[i], x[i])
			}
		}
	}
}

func TestFFTSize(t *testing.T) {
	// Source: definition: the smallest integer >= n with no prime factor
	// other than 2, 3, 5 (5-smooth numbers, OEIS A051037; the sequence
	// number recalled from memory).
	for n, want := range map[int]int{1: 1, 7: 8, 11: 12, 13: 15, 17: 18, 49: 50, 97: 100, 599: 600, 601: 625} {
		if got := fftSize(n); got != want {
			t.Errorf("fftSize(%d) = %d, want %d", n, got, want)
		}
	}
}

// The portable Go butterflies and the AVX ones do the same float32
// operations in the same order (IEEE 754 rounds each one the same way), so
// they must give the same bits: restorations and simulations do not depend
// on the machine's vector units (project requirement). Source: IEEE
// 754-2008 section 5.4.1 (each arithmetic operation correctly rounded).
func TestFFT32PortableMatchesVector(t *testing.T) {
	if !useAVX {
		t.Skip("no vector kernels on this machine: the portable path is what TestFFT32MatchesDFT checked")
	}
	r := rand.New(rand.NewPCG(15, 16))
	for _, n := range []int{3, 4, 5, 8, 9, 15, 16, 25, 60, 64, 75, 640} {
		p := newPlan32(n)
		for _, nb := range []int{1, 4, 16} {
			for _, inv := range []bool{false, true} {
				x := randComplex(r, n*nb)
				k := randComplex(r, n*nb)
				a, b := append([]complex64(nil), x...), append([]complex64(nil), x...)
				va := p.transform(a, make([]complex64, n*nb), nb, inv)
				cmulSlice(va, k, inv)
				useAVX = false
				gb := p.transform(b, make([]complex64, n*nb), nb, inv)
				cmulSlice(gb, k, inv)
				useAVX = true
				for i := range va {
					if va[i] != gb[i] {
						t.Fatalf("n=%d nb=%d inverse=%v: value %d vector %v, portable %v", n, nb, inv, i, va[i], gb[i])
					}
				}
			}
		}
	}
}

// Source: definition of the transpose, dst[c][r] = src[r][c], for the
// vector 4x4-block path and the portable loop.
func TestTransposeC(t *testing.T) {
	r := rand.New(rand.NewPCG(17, 18))
	for _, sz := range [][2]int{{4, 4}, {8, 12}, {16, 640}, {3, 5}, {4, 6}} {
		rows, cols := sz[0], sz[1]
		ss, ds := cols+3, rows+1 // strides wider than the block
		src := randComplex(r, rows*ss)
		dst := make([]complex64, cols*ds)
		transposeC(dst, ds, src, ss, rows, cols)
		for i := 0; i < rows; i++ {
			for j := 0; j < cols; j++ {
				if dst[j*ds+i] != src[i*ss+j] {
					t.Fatalf("%dx%d: dst[%d][%d] = %v, src[%d][%d] = %v", rows, cols, j, i, dst[j*ds+i], i, j, src[i*ss+j])
				}
			}
		}
	}
}

// Source: definition: fftGoodSize returns a multiple of 4 at least n whose
// only prime factors are 2, 3 and 5, within 5n/4 + 4.
func TestFFTGoodSize(t *testing.T) {
	for n := 1; n < 3000; n += 29 {
		m := fftGoodSize(n)
		if m < n || m%4 != 0 || !Smooth235(m) || m >= n+n/4+4 {
			t.Fatalf("fftGoodSize(%d) = %d", n, m)
		}
	}
}
