package step

import (
	"context"
	"math/rand/v2"
	"testing"

	"limpid/psf"
)

// BenchmarkParticleEMS512 measures the particle method on one 512x512 tile
// (Gaussian sigma 1.5 PSF, 13 separable taps, the default smoothing) at 16
// particles per pixel, in million particle-iterations per second on one core
// (issue target: >= 25), with the split of the time between the phases.
func BenchmarkParticleEMS512(b *testing.B) { benchParticle(b, PotentialExact, Stratified) }

// BenchmarkParticleEMS512Sampled is the same with the sampled potential.
func BenchmarkParticleEMS512Sampled(b *testing.B) { benchParticle(b, PotentialSampled, Stratified) }

func benchParticle(b *testing.B, pot Potential, rs Resampling) {
	const n, iters, K = 512, 10, 16
	r := rand.New(rand.NewPCG(1, 1))
	d := make([]float32, n*n)
	for i := range d {
		d[i] = 500 + 1000*r.Float32()
	}
	k, _ := psf.GaussianIso(1.5)
	sk := SmoothingKernel(DefaultSmooth)
	var tm ParticleTiming
	pe := &ParticleEMS{H: NewConv(k), PSF: k, SmoothX: sk, SmoothY: sk, Iterations: iters, PerPixel: K,
		Potential: pot, Resampling: rs, ESSThreshold: DefaultESSThreshold, BurnIn: iters / 2, Batches: 5, Seed: 1}
	var ws Workspace
	dst, se := make([]float32, n*n), make([]float32, n*n)
	p := &Problem{D: make([]float32, n*n), Mask: ones(n * n), W: n, H: n, SE: se}
	copy(p.D, d)
	pe.Solve(context.Background(), &ws, p, dst) // warm the workspace
	pe.Timing = &tm
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		copy(p.D, d)
		if _, err := pe.Solve(context.Background(), &ws, p, dst); err != nil {
			b.Fatal(err)
		}
	}
	b.StopTimer()
	b.ReportMetric(float64(tm.ParticleIterations)/b.Elapsed().Seconds()/1e6, "Mpart-iter/s")
	tot := (tm.Splat + tm.Convolution + tm.Reweight + tm.Resample + tm.Mutate + tm.Estimate).Seconds()
	for _, ph := range []struct {
		name string
		v    float64
	}{{"splat", tm.Splat.Seconds()}, {"conv", tm.Convolution.Seconds()}, {"reweight", tm.Reweight.Seconds()},
		{"resample", tm.Resample.Seconds()}, {"mutate", tm.Mutate.Seconds()}, {"estimate", tm.Estimate.Seconds()}} {
		b.ReportMetric(100*ph.v/tot, "%"+ph.name)
	}
	b.ReportMetric(float64(tm.Resamplings)/float64(b.N), "resamplings/op")
}
