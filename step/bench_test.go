package step

import (
	"context"
	"math"
	"math/rand/v2"
	"testing"

	"limpid/psf"
	"limpid/step/conv"
	"limpid/step/internal/vec"
	"limpid/step/noise"
)

// BenchmarkGridEMS512 measures grid EMS throughput on one 512x512 tile with
// a Gaussian sigma 1.5 PSF (13 separable taps) and the default smoothing, in
// megapixel-iterations per second on one core (issue target: >= 30).
func BenchmarkGridEMS512(b *testing.B) {
	benchEMS(b, 1.5, DefaultSmooth)
}

// BenchmarkRL512 is the same with S = I (Richardson-Lucy).
func BenchmarkRL512(b *testing.B) { benchEMS(b, 1.5, 0) }

// BenchmarkGridEMS512FFT uses a rotated anisotropic PSF (13x9 taps, FFT
// path).
func BenchmarkGridEMS512FFT(b *testing.B) {
	k, _ := psf.GaussianAniso(1.5, 0.8, 30)
	benchRoute(b, k, "fft")
}

// BenchmarkGridEMS512FFTLarge: sigma 2.5 x 1.0 turned 30 degrees (19x15
// taps, FFT path), the kernel.
func BenchmarkGridEMS512FFTLarge(b *testing.B) {
	k, _ := psf.GaussianAniso(2.5, 1.0, 30)
	benchRoute(b, k, "fft")
}

// BenchmarkGridEMS512Direct: sigma 1.0 x 0.5 turned 30 degrees (9x7 taps,
// direct path).
func BenchmarkGridEMS512Direct(b *testing.B) {
	k, _ := psf.GaussianAniso(1.0, 0.5, 30)
	benchRoute(b, k, "direct")
}

// benchRoute is benchKernel after checking the route New chooses.
func benchRoute(b *testing.B, k *psf.Kernel, route string) {
	if got := conv.New(k).Kind(); got != route {
		b.Fatalf("%dx%d kernel: route %s, the benchmark measures %s", k.W, k.H, got, route)
	}
	benchKernel(b, k, DefaultSmooth)
}

// BenchmarkGridEMS512Portable is BenchmarkGridEMS512 with the vector
// kernels (package vec) turned off: the ratio of the two is the vector
// speed-up of the separable path.
func BenchmarkGridEMS512Portable(b *testing.B) {
	portable(b)
	benchEMS(b, 1.5, DefaultSmooth)
}

// BenchmarkGridEMS512DirectPortable is BenchmarkGridEMS512Direct on the
// portable kernels.
func BenchmarkGridEMS512DirectPortable(b *testing.B) {
	portable(b)
	BenchmarkGridEMS512Direct(b)
}

// portable forces package vec's portable kernels for the rest of b.
func portable(b *testing.B) {
	vec.SetPortable(true)
	b.Cleanup(func() { vec.SetPortable(false) })
}

func benchEMS(b *testing.B, sigma, eps float64) {
	k, _ := psf.GaussianIso(sigma)
	benchKernel(b, k, eps)
}

func benchKernel(b *testing.B, k *psf.Kernel, eps float64) {
	const n, iters = 512, 10
	r := rand.New(rand.NewPCG(1, 1))
	d := make([]float32, n*n)
	for i := range d {
		d[i] = 500 + 1000*r.Float32()
	}
	g := &GridEMS{H: conv.New(k), Iterations: iters}
	if sk := conv.SmoothingKernel(eps); sk != nil {
		g.S = conv.NewSeparable(sk, sk)
	}
	var ws Workspace
	dst := make([]float32, n*n)
	p := &Problem{D: make([]float32, n*n), Mask: ones(n * n), W: n, H: n}
	copy(p.D, d)
	g.Solve(context.Background(), &ws, p, dst) // warm the workspace
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		copy(p.D, d)
		if _, err := g.Solve(context.Background(), &ws, p, dst); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(n*n*iters)*float64(b.N)/b.Elapsed().Seconds()/1e6, "Mpix-iter/s")
}

// BenchmarkRiskIteration512 measures one EMS iteration carrying the
// derivative and the DCT-domain risk evaluated every iteration, on a
// 512x512 tile (sigma 1.5 PSF, eps 0.3), against BenchmarkGridEMS512's
// plain iteration: the per-iteration cost factor of --stop auto.
func BenchmarkRiskIteration512(b *testing.B) {
	const n, iters = 512, 10
	k, _ := psf.GaussianIso(1.5)
	r := rand.New(rand.NewPCG(1, 1))
	d := make([]float32, n*n)
	for i := range d {
		d[i] = 500 + 1000*r.Float32()
	}
	g := newGrid(conv.New(k), 0.3, iters, 0)
	rw, _ := newRiskWeights(k, n, n)
	nm := &noise.Model{A: 0.4, B: 9}
	var ws Workspace
	aw := &autoWork{}
	p := &Problem{D: make([]float32, n*n), Mask: ones(n * n), W: n, H: n}
	copy(p.D, d)
	rp := setupRisk(aw, p, nm, rw, 1, NoiseInflation)
	runRisk(context.Background(), &ws, aw, rp, g, iters, false, false, math.Inf(1))
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if _, err := runRisk(context.Background(), &ws, aw, rp, g, iters, false, false, math.Inf(1)); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(n*n*iters)*float64(b.N)/b.Elapsed().Seconds()/1e6, "Mpix-iter/s")
}

// BenchmarkRiskIteration512Portable is BenchmarkRiskIteration512 on package
// vec's portable kernels (the risk's float32 DCT keeps its vector
// butterflies).
func BenchmarkRiskIteration512Portable(b *testing.B) {
	portable(b)
	BenchmarkRiskIteration512(b)
}
