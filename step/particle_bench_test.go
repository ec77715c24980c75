package step

import (
	"context"
	"math/rand/v2"
	"testing"

	"limpid/psf"
	"limpid/step/conv"
	"limpid/step/resample"
)

// BenchmarkParticleEMS512 measures the particle method on one 512x512 tile
// (Gaussian sigma 1.5 PSF, 13 separable taps, the default smoothing) at 16
// particles per pixel with the defaults (exact potential, stratified
// resampling at ESS < N/2, 4 replicate clouds), in million
// particle-iterations per second on one core (issue target: >= 25), with the
// split of the time between the phases in per cent.
func BenchmarkParticleEMS512(b *testing.B) { benchParticle(b, PotentialExact, 0.5, 4) }

// BenchmarkParticleEMS512OneCloud runs one cloud of 16 per pixel (batch
// means): one convolution pair per iteration instead of four.
func BenchmarkParticleEMS512OneCloud(b *testing.B) { benchParticle(b, PotentialExact, 0.5, 1) }

// BenchmarkParticleEMS512Resample resamples at every iteration (ESS
// threshold 1), to measure the resampling cost.
func BenchmarkParticleEMS512Resample(b *testing.B) { benchParticle(b, PotentialExact, 1, 4) }

// BenchmarkParticleEMS512Sampled uses the sampled potential.
func BenchmarkParticleEMS512Sampled(b *testing.B) { benchParticle(b, PotentialSampled, 0.5, 4) }

func benchParticle(b *testing.B, pot Potential, ess float64, reps int) {
	const n, iters, K = 512, 10, 16
	r := rand.New(rand.NewPCG(1, 1))
	d := make([]float32, n*n)
	for i := range d {
		d[i] = 500 + 1000*r.Float32()
	}
	k, _ := psf.GaussianIso(1.5)
	sk := conv.SmoothingKernel(DefaultSmooth)
	var tm ParticleTiming
	pe := &ParticleEMS{H: conv.New(k), PSF: k, SmoothX: sk, SmoothY: sk, Iterations: iters, PerPixel: K,
		Potential: pot, Resampling: resample.Stratified, ESSThreshold: ess, BurnIn: iters / 2, Batches: 5, Replicates: reps, Seed: 1}
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

// BenchmarkParticleEMS512Portable is BenchmarkParticleEMS512 on package
// vec's portable kernels (its convolutions; splat, reweight and mutation
// are scalar on both).
func BenchmarkParticleEMS512Portable(b *testing.B) {
	portable(b)
	BenchmarkParticleEMS512(b)
}
