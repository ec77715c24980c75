package conv

import (
	"math"
	"math/rand/v2"
	"testing"

	"limpid/psf"
	"limpid/raster"
	"limpid/step/internal/vec"
)

// bothPaths runs fn with the portable kernels forced and, on CPUs with the
// vector kernels (package vec), with those: the operator-level checks must
// hold on either path.
func bothPaths(t *testing.T, fn func(t *testing.T)) {
	t.Helper()
	t.Cleanup(func() { vec.SetPortable(false) })
	vec.SetPortable(true)
	t.Run("portable", fn)
	vec.SetPortable(false)
	if vec.Accelerated() {
		t.Run("vector", fn)
	}
}

// naiveConv is the textbook definition: out(x,y) = sum h(dx,dy) in(m(x-dx), m(y-dy))
// with half-sample symmetric reflection m, in float64.
func naiveConv(k *psf.Kernel, src []float32, w, h int) []float64 {
	out := make([]float64, w*h)
	for y := 0; y < h; y++ {
		for x := 0; x < w; x++ {
			var s float64
			for dy := -k.Ry(); dy <= k.Ry(); dy++ {
				for dx := -k.Rx(); dx <= k.Rx(); dx++ {
					s += k.At(dx, dy) * float64(src[raster.Mirror(y-dy, h)*w+raster.Mirror(x-dx, w)])
				}
			}
			out[y*w+x] = s
		}
	}
	return out
}

func randPlane(r *rand.Rand, n int) []float32 {
	p := make([]float32, n)
	for i := range p {
		p[i] = r.Float32()
	}
	return p
}

// testKernels covers the three implementations with symmetric and
// asymmetric weights.
func testKernels(t *testing.T) map[string]*psf.Kernel {
	t.Helper()
	out := map[string]*psf.Kernel{}
	g, err := psf.GaussianIso(1.5)
	if err != nil {
		t.Fatal(err)
	}
	out["separable-gauss1.5"] = g
	a, err := psf.GaussianAniso(1.2, 0.6, 30)
	if err != nil {
		t.Fatal(err)
	}
	out["fft-aniso"] = a
	r := rand.New(rand.NewPCG(1, 2))
	asym := make([]float64, 5*3)
	for i := range asym {
		asym[i] = r.Float64()
	}
	k, err := psf.NewKernel(5, 3, asym)
	if err != nil {
		t.Fatal(err)
	}
	out["direct-asym5x3"] = k
	sep, err := psf.NewKernel(3, 5, []float64{1, 2, 3, 2, 4, 6, 1, 2, 3, 0.5, 1, 1.5, 0, 0, 0})
	if err != nil {
		t.Fatal(err)
	}
	out["separable-asym3x5"] = sep
	big := make([]float64, 11*9)
	for i := range big {
		big[i] = r.Float64()
	}
	kb, err := psf.NewKernel(11, 9, big)
	if err != nil {
		t.Fatal(err)
	}
	out["fft-asym11x9"] = kb
	// Long separable kernel (37 taps: more source rows than one vec.Corr
	// call takes, and a radius beyond the test planes' height).
	g6, err := psf.GaussianIso(6)
	if err != nil {
		t.Fatal(err)
	}
	out["separable-gauss6"] = g6
	// The tallest direct kernel (3 x 27 = directMaxTaps).
	tall := make([]float64, 3*27)
	for i := range tall {
		tall[i] = r.Float64()
	}
	kt, err := psf.NewKernel(3, 27, tall)
	if err != nil {
		t.Fatal(err)
	}
	out["direct-asym3x27"] = kt
	return out
}

// Source: definition of convolution with half-sample symmetric extension
// (Martucci, IEEE TSP 42(5):1038, 1994), evaluated naively in float64.
func TestConvMatchesDefinition(t *testing.T) { bothPaths(t, testConvMatchesDefinition) }

func testConvMatchesDefinition(t *testing.T) {
	// float32 accumulation over <= 99 taps of values in [0,1): relative 1e-5
	// covers rounding (float32 epsilon 6e-8 times tap count, with margin;
	// a fused multiply-add rounds once where mul+add rounds twice, which
	// stays inside the same bound).
	const tol = 1e-5
	r := rand.New(rand.NewPCG(3, 4))
	for name, k := range testKernels(t) {
		c := New(k)
		for _, sz := range [][2]int{{37, 23}, {8, 5}, {3, 2}} {
			w, h := sz[0], sz[1]
			src := randPlane(r, w*h)
			dst := make([]float32, w*h)
			var ws Work
			c.Apply(&ws, dst, src, w, h)
			want := naiveConv(k, src, w, h)
			for i := range dst {
				if math.Abs(float64(dst[i])-want[i]) > tol {
					t.Fatalf("%s (%s) %dx%d: pixel %d = %g, definition %g", name, c.Kind(), w, h, i, dst[i], want[i])
				}
			}
		}
	}
}

// Source: definition of the adjoint, <H x, y> = <x, H^T y> (exact adjoint
// needed by the EM identity of Shepp & Vardi 1982).
func TestConvAdjoint(t *testing.T) { bothPaths(t, testConvAdjoint) }

func testConvAdjoint(t *testing.T) {
	// Inner products of ~900 float32 products: relative 1e-5.
	const tol = 1e-5
	r := rand.New(rand.NewPCG(5, 6))
	for name, k := range testKernels(t) {
		c := New(k)
		for _, sz := range [][2]int{{37, 23}, {8, 5}, {4, 3}} {
			w, h := sz[0], sz[1]
			x, y := randPlane(r, w*h), randPlane(r, w*h)
			hx, hty := make([]float32, w*h), make([]float32, w*h)
			var ws Work
			c.Apply(&ws, hx, x, w, h)
			c.Adjoint(&ws, hty, y, w, h)
			var a, b float64
			for i := range x {
				a += float64(hx[i]) * float64(y[i])
				b += float64(x[i]) * float64(hty[i])
			}
			if math.Abs(a-b) > tol*math.Abs(a) {
				t.Fatalf("%s (%s) %dx%d: <Hx,y>=%g <x,H^T y>=%g", name, c.Kind(), w, h, a, b)
			}
		}
	}
}

func TestConvKindChoice(t *testing.T) {
	for name, k := range testKernels(t) {
		c := New(k)
		want := name[:len(c.Kind())]
		if c.Kind() != want {
			t.Errorf("%s: chose %s", name, c.Kind())
		}
	}
}

// Source: derived: the smoothing kernel must have variance eps^2 (a
// point-sampled Gaussian below eps ~ 0.25 is numerically the identity, so
// small bandwidths use the 3 taps [a, 1 - 2a, a], whose variance 2a is set
// to eps^2) and sum 1 (EMS keeps flux only with a normalised S).
func TestSmoothingKernelVariance(t *testing.T) {
	const tol = 1e-9 // bisection to 2^-60 of the bracket
	// The variance is a sum of <= 31 products of O(1) taps: float64
	// rounding is ~1e-15; 1e-6 covers the sampled Gaussian's variance
	// matching, which stops at that accuracy.
	const varTol = 1e-6
	for _, eps := range []float64{0.2, 0.3, 0.5, 0.7, 1, 2.5} {
		k := SmoothingKernel(eps)
		r := (len(k) - 1) / 2
		var s, v float64
		for i, x := range k {
			s += x
			v += x * float64(i-r) * float64(i-r)
		}
		if math.Abs(s-1) > tol || math.Abs(v-eps*eps) > varTol {
			t.Errorf("eps %g: sum %g variance %g", eps, s, v)
		}
	}
}

// TestPortableOperator: Portable() must give exactly the bits of the
// operator with package vec's portable path forced (the machine-independent
// results simulated scenes rely on), on every implementation that uses vec.
// Source: project requirement (the same fixtures on every CPU), no outside
// source.
func TestPortableOperator(t *testing.T) {
	defer vec.SetPortable(false)
	r := rand.New(rand.NewPCG(7, 8))
	const w, h = 37, 23
	for name, k := range testKernels(t) {
		c := New(k)
		src := randPlane(r, w*h)
		var ws Work
		for _, adjoint := range []bool{false, true} {
			want, got := make([]float32, w*h), make([]float32, w*h)
			op := c.Apply
			if adjoint {
				op = c.Adjoint
			}
			vec.SetPortable(true)
			op(&ws, want, src, w, h)
			vec.SetPortable(false)
			p := c.Portable()
			if adjoint {
				p.Adjoint(&ws, got, src, w, h)
			} else {
				p.Apply(&ws, got, src, w, h)
			}
			for i := range got {
				if math.Float32bits(got[i]) != math.Float32bits(want[i]) {
					t.Fatalf("%s adjoint=%v: pixel %d Portable() %g, forced portable %g", name, adjoint, i, got[i], want[i])
				}
			}
		}
	}
}
