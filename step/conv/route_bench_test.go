package conv

import (
	"fmt"
	"math/rand/v2"
	"syscall"
	"testing"

	"limpid/psf"
)

// benchKernels are the non-separable kernels users have: turned anisotropic
// Gaussians, a motion smear and a large diffraction-like kernel.
func benchKernels(b *testing.B) map[string]*psf.Kernel {
	b.Helper()
	out := map[string]*psf.Kernel{}
	for _, g := range []struct {
		name       string
		sx, sy, an float64
	}{{"gauss1.5x0.8@20", 1.5, 0.8, 20}, {"gauss2.5x1.0@30", 2.5, 1.0, 30}, {"gauss4x2@30", 4, 2, 30}} {
		k, err := psf.GaussianAniso(g.sx, g.sy, g.an)
		if err != nil {
			b.Fatal(err)
		}
		out[g.name] = k
	}
	for _, spec := range []string{"motion:length=9,angle=30*gaussian:sigma=0.6", "diffraction:wavelength=0.65,fnumber=8,pitch=10*detector:fill=0.9*gaussian:sigma=0.4"} {
		sys, err := psf.ParseTransfer(spec)
		if err != nil {
			b.Fatal(err)
		}
		k, _, err := sys.Kernel()
		if err != nil {
			b.Fatal(err)
		}
		out[spec[:6]] = k
	}
	r := rand.New(rand.NewPCG(7, 7))
	for _, n := range []int{3, 5, 7, 9} {
		data := make([]float64, n*n)
		for i := range data {
			data[i] = 0.5 + r.Float64()
		}
		k, err := psf.NewKernel(n, n, data)
		if err != nil {
			b.Fatal(err)
		}
		out[fmt.Sprintf("random%d", n)] = k
	}
	return out
}

// cpuSeconds is the process's user + system CPU time.
func cpuSeconds() float64 {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0
	}
	return float64(ru.Utime.Sec+ru.Stime.Sec) + 1e-6*float64(ru.Utime.Usec+ru.Stime.Usec)
}

// BenchmarkConvRoutes times Apply + Adjoint per route on a 584 x 584 tile
// (512 plus the default halo of a radius-9 kernel), in megapixels per
// second for the pair (one EM iteration's convolutions) on one core.
func BenchmarkConvRoutes(b *testing.B) {
	const n = 584
	r := rand.New(rand.NewPCG(1, 1))
	src := randPlane(r, n*n)
	dst := make([]float32, n*n)
	for name, k := range benchKernels(b) {
		for _, kind := range []convKind{convDirect, convFFT} {
			if kind == convDirect && k.W*k.H > 1000 {
				continue
			}
			c := newKind(k, kind)
			b.Run(fmt.Sprintf("%s/%dx%d/%s", name, k.W, k.H, kind), func(b *testing.B) {
				var ws Work
				c.Apply(&ws, dst, src, n, n)
				b.ResetTimer()
				t0 := cpuSeconds()
				for i := 0; i < b.N; i++ {
					c.Apply(&ws, dst, src, n, n)
					c.Adjoint(&ws, src, dst, n, n)
				}
				cpu := cpuSeconds() - t0
				b.ReportMetric(float64(n*n)*float64(b.N)/b.Elapsed().Seconds()/1e6, "Mpix-iter/s")
				// CPU time is less disturbed than wall time on a shared machine.
				b.ReportMetric(float64(n*n)*float64(b.N)/cpu/1e6, "Mpix-iter/cpu-s")
			})
		}
	}
}

// BenchmarkFFT32Radix times batched transforms (16 vectors) of lengths made
// of one radix each, in ns per point and stage: the per-point costs of
// fftCost.
func BenchmarkFFT32Radix(b *testing.B) {
	r := rand.New(rand.NewPCG(3, 3))
	for _, c := range []struct{ n, radix, stages int }{{1024, 4, 5}, {512, 2, 5}, {729, 3, 6}, {625, 5, 4}} {
		p := newPlan32(c.n)
		if len(p.stages) != c.stages {
			b.Fatalf("n=%d: %d stages", c.n, len(p.stages))
		}
		x := randComplex(r, c.n*fftBatch)
		y := make([]complex64, len(x))
		b.Run(fmt.Sprintf("n%d", c.n), func(b *testing.B) {
			for i := 0; i < b.N; i++ {
				p.transform(x, y, fftBatch, false)
			}
			ns := float64(b.Elapsed().Nanoseconds()) / float64(b.N)
			// Per stage: divide by the stage count (512 = 4^4 2: subtract
			// four radix-4 stages measured at 1024).
			b.ReportMetric(ns/float64(c.n*fftBatch), "ns/point")
		})
	}
}
