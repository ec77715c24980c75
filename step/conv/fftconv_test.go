package conv

import (
	"fmt"
	"math"
	"math/rand/v2"
	"testing"

	"limpid/psf"
)

// fftTestKernels are non-separable kernels of several shapes, each run
// through the FFT path whatever New would choose.
func fftTestKernels(t *testing.T) map[string]*psf.Kernel {
	t.Helper()
	out := map[string]*psf.Kernel{}
	for name, g := range map[string][3]float64{"gauss2.5x1.0@30": {2.5, 1.0, 30}, "gauss1.5x0.8@20": {1.5, 0.8, 20}} {
		k, err := psf.GaussianAniso(g[0], g[1], g[2])
		if err != nil {
			t.Fatal(err)
		}
		out[name] = k
	}
	r := rand.New(rand.NewPCG(21, 22))
	for _, sz := range [][2]int{{3, 3}, {7, 3}, {1, 5}, {13, 11}} {
		data := make([]float64, sz[0]*sz[1])
		for i := range data {
			data[i] = r.Float64()
		}
		k, err := psf.NewKernel(sz[0], sz[1], data)
		if err != nil {
			t.Fatal(err)
		}
		out[fmt.Sprintf("random%dx%d", sz[0], sz[1])] = k
	}
	return out
}

// fftTestSizes include planes smaller than the kernel and odd, prime and
// 2,3,5-smooth sizes (the two halves differ by one row when h is odd).
var fftTestSizes = [][2]int{{37, 23}, {8, 5}, {3, 2}, {1, 1}, {64, 45}, {17, 31}}

// Source: definition of convolution with half-sample symmetric extension
// (Martucci, IEEE TSP 42(5):1038, 1994), evaluated naively in float64.
func TestFFTConvMatchesDefinition(t *testing.T) {
	// float32 FFT convolution: error ~ eps log2(PQ) times the plane's rms
	// (inputs in [0, 1), outputs <= 1): 2e-6 absolute is 2x the
	// 6e-8 * 17 bound for grids up to 2^17 points (common practice, no
	// source, for the margin).
	const tol = 2e-6
	r := rand.New(rand.NewPCG(23, 24))
	for name, k := range fftTestKernels(t) {
		c := newKind(k, convFFT)
		var ws Work
		for _, sz := range fftTestSizes {
			w, h := sz[0], sz[1]
			src := randPlane(r, w*h)
			dst := make([]float32, w*h)
			c.Apply(&ws, dst, src, w, h)
			want := naiveConv(k, src, w, h)
			for i := range dst {
				if math.Abs(float64(dst[i])-want[i]) > tol {
					t.Fatalf("%s %dx%d %dx%d: pixel %d = %g, definition %g", name, k.W, k.H, w, h, i, dst[i], want[i])
				}
			}
		}
	}
}

// Source: definition of the adjoint, <H x, y> = <x, H^T y> (the exact
// adjoint the EM identity of Shepp & Vardi, IEEE TMI 1(2):113, 1982 needs),
// with H^T checked against the direct path's adjoint too.
func TestFFTConvAdjoint(t *testing.T) {
	// Inner products of up to 2880 float32 values in [0, 1) accumulated in
	// float64: relative 1e-5 covers the FFT's float32 rounding (~1e-6 per
	// value); the pointwise comparison with the direct adjoint uses the
	// definition test's absolute 2e-6 scaled by the kernel's fold (<= 4
	// mirrored contributions per pixel).
	const tol, pointTol = 1e-5, 8e-6
	r := rand.New(rand.NewPCG(25, 26))
	for name, k := range fftTestKernels(t) {
		c := newKind(k, convFFT)
		d := newKind(k, convDirect)
		var ws, wd Work
		for _, sz := range fftTestSizes {
			w, h := sz[0], sz[1]
			x, y := randPlane(r, w*h), randPlane(r, w*h)
			hx, hty, dty := make([]float32, w*h), make([]float32, w*h), make([]float32, w*h)
			c.Apply(&ws, hx, x, w, h)
			c.Adjoint(&ws, hty, y, w, h)
			d.Adjoint(&wd, dty, y, w, h)
			var a, b float64
			for i := range x {
				a += float64(hx[i]) * float64(y[i])
				b += float64(x[i]) * float64(hty[i])
				if math.Abs(float64(hty[i]-dty[i])) > pointTol {
					t.Fatalf("%s %dx%d: H^T y at %d = %g (fft), %g (direct)", name, w, h, i, hty[i], dty[i])
				}
			}
			if math.Abs(a-b) > tol*math.Abs(a) {
				t.Fatalf("%s %dx%d: <Hx,y>=%g <x,H^T y>=%g", name, w, h, a, b)
			}
		}
	}
}

// Source: derived: the extension of a constant plane is constant and the
// kernel sums to 1, so H c = c; and the EM flux identity
// sum_i f_i (H^T q)_i = sum_i d_i for q = d / H f (Shepp & Vardi 1982, the
// identity behind EM's flux conservation) holds with the exact adjoint.
func TestFFTConvFlux(t *testing.T) {
	// A constant 1000 through the float32 FFT: 1e-6 relative per pixel
	// (eps log2(PQ) with margin); the flux sums over 2880 pixels in
	// float64: relative 1e-5.
	const constTol, fluxTol = 1e-6, 1e-5
	r := rand.New(rand.NewPCG(27, 28))
	for name, k := range fftTestKernels(t) {
		c := newKind(k, convFFT)
		var ws Work
		w, h := 64, 45
		one := make([]float32, w*h)
		for i := range one {
			one[i] = 1000
		}
		out := make([]float32, w*h)
		c.Apply(&ws, out, one, w, h)
		for i, v := range out {
			if math.Abs(float64(v)/1000-1) > constTol {
				t.Fatalf("%s: H of a constant 1000 at %d = %g", name, i, v)
			}
		}
		f, d := randPlane(r, w*h), randPlane(r, w*h)
		for i := range f {
			f[i] += 0.5 // keep H f well away from 0
		}
		hf, q, htq := make([]float32, w*h), make([]float32, w*h), make([]float32, w*h)
		c.Apply(&ws, hf, f, w, h)
		var sd, sf float64
		for i := range q {
			q[i] = d[i] / hf[i]
			sd += float64(d[i])
		}
		c.Adjoint(&ws, htq, q, w, h)
		for i := range f {
			sf += float64(f[i]) * float64(htq[i])
		}
		if math.Abs(sf-sd) > fluxTol*sd {
			t.Errorf("%s: sum f H^T(d/Hf) = %g, sum d = %g", name, sf, sd)
		}
	}
}
