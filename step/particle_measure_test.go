package step

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"strings"
	"testing"
	"time"

	"limpid/psf"
	"limpid/raster"
	"limpid/step/conv"
	"limpid/step/resample"
)

// measureScene is one scene of the particle measurements.
type measureScene struct {
	name     string
	ref, obs []float32
	valid    []bool
	n        int
	L        float64 // PSNR peak
	k        *psf.Kernel
}

func measureScenes(t *testing.T, n int) []measureScene {
	k, err := psf.GaussianIso(1.4) // the demo's PSF
	if err != nil {
		t.Fatal(err)
	}
	H := conv.New(k)
	rng := rand.New(rand.NewPCG(2026, 3))
	bands, valid := ValleyReference(n, n)
	red := bands[2]
	obs := Degrade(red, valid, n, n, H, Noise{Gain: 0.4, Read: 3}, rng)
	for i, v := range obs {
		if valid[i] {
			obs[i] = float32(math.Min(4095, math.Max(1, math.Round(float64(v)))))
		}
	}
	night := NightReference(n, n)
	all := make([]bool, n*n)
	for i := range all {
		all[i] = true
	}
	nobs := Degrade(night, all, n, n, H, Noise{Gain: 1}, rng) // photon counts only
	var peak, mean float64
	for _, v := range night {
		peak = math.Max(peak, float64(v))
		mean += float64(v) / float64(n*n)
	}
	t.Logf("night scene: mean %.2f counts per pixel, peak %.0f", mean, peak)
	return []measureScene{
		{name: "Brannock Vale red band (demo scene)", ref: red, obs: obs, valid: valid, n: n, L: 4095, k: k},
		{name: "Quillhaven harbour at night (photon counts)", ref: night, obs: nobs, valid: all, n: n, L: peak, k: k},
	}
}

func (s measureScene) mem() *raster.Mem {
	m := raster.NewMem(raster.Meta{Width: s.n, Height: s.n, DataType: "Float32", Bands: []raster.BandInfo{{NoData: -1, HasNoData: true}}})
	for i, v := range s.obs {
		if s.valid[i] {
			m.Bands[0][i] = v
		} else {
			m.Bands[0][i] = -1
		}
	}
	return m
}

// TestParticleMeasure is the measurement behind the particle method's
// defaults and the README's advice (DEVELOPERS.md, "Particle EMS: cost and
// accuracy"). It runs only with LIMPID_PARTICLE_MEASURE=1 (a few minutes on
// one core); LIMPID_PARTICLE_OUT=FILE also writes the markdown tables.
// Source: a measurement on scenes of our own (no outside reference).
func TestParticleMeasure(t *testing.T) {
	if os.Getenv("LIMPID_PARTICLE_MEASURE") == "" {
		t.Skip("set LIMPID_PARTICLE_MEASURE=1 to run the particle measurements")
	}
	var md strings.Builder
	scenes := measureScenes(t, 256)
	fmt.Fprintf(&md, "Cost and accuracy, 256x256, one tile, one worker, PSF gaussian:sigma=1.4, smooth %.1f, %d iterations (particle: burn-in %d, standard error from replicate clouds):\n\n",
		DefaultSmooth, DefaultIterations, DefaultIterations/2)
	fmt.Fprintf(&md, "| scene | method | PSNR (dB) | wall (s) | mean reported SE | SE / signal |\n|---|---|---|---|---|---|\n")
	for _, s := range scenes {
		src := s.mem()
		fmt.Fprintf(&md, "| %s | observed | %.2f | | | |\n", s.name, PSNR(s.ref, s.obs, s.valid, s.L))
		cfg := Config{PSF: s.k, PSFSpec: "gaussian:sigma=1.4", Smooth: DefaultSmooth, Iterations: DefaultIterations,
			Tolerance: DefaultTolerance, Tile: 512, Overlap: -1, Workers: 1, Seed: 1}
		for _, tol := range []float64{DefaultTolerance, 0} {
			c := cfg
			c.Tolerance = tol
			out, rep := restoreMem(t, src, []int{0}, c)
			fmt.Fprintf(&md, "| | grid (tolerance %g, %d iterations) | %.2f | %.2f | | |\n", tol, rep.Bands[0].MaxIterations, PSNR(s.ref, out.Bands[0], s.valid, s.L), rep.WallSeconds)
		}
		for _, run := range []struct{ K, burn int }{{1, -1}, {4, -1}, {16, -1}, {64, -1}, {16, 10}, {64, 10}} {
			K := run.K
			c := cfg
			c.Method = "particle"
			c.Particle = DefaultParticle()
			c.Particle.PerPixel = K
			c.Particle.Replicates = 0
			c.Particle.BurnIn = run.burn
			se := raster.NewMem(src.Meta())
			c.Uncertainty = se
			out, rep := restoreMem(t, src, []int{0}, c)
			pb := rep.Particle.Bands[0]
			fmt.Fprintf(&md, "| | particle K=%d, burn-in %d (%s) | %.2f | %.2f | %.2f | %.1f %% |\n", K, rep.Particle.BurnIn, rep.Particle.SEMethod,
				PSNR(s.ref, out.Bands[0], s.valid, s.L), rep.WallSeconds, pb.MeanSE, 100*pb.RelativeSE)
		}
	}
	variance(t, &md, scenes)
	t.Log("\n" + md.String())
	if p := os.Getenv("LIMPID_PARTICLE_OUT"); p != "" {
		os.WriteFile(p, []byte(md.String()), 0o644)
	}
}

// variance measures the Monte Carlo error of variants at K = 16 on a 96x96
// crop of each scene: the RMS over pixels of the spread over 8 seeds.
func variance(t *testing.T, md *strings.Builder, scenes []measureScene) {
	const n, seeds = 96, 8
	type variant struct {
		name string
		set  func(pe *ParticleEMS)
	}
	vs := []variant{
		{"baseline: exact potential, stratified, ESS 0.5, burn-in 25 of 50, Rao-Blackwellised estimate, one cloud", func(pe *ParticleEMS) {}},
		{"sampled potential", func(pe *ParticleEMS) { pe.Potential = PotentialSampled }},
		{"systematic resampling", func(pe *ParticleEMS) { pe.Resampling = resample.Systematic }},
		{"residual resampling", func(pe *ParticleEMS) { pe.Resampling = resample.Residual }},
		{"multinomial resampling", func(pe *ParticleEMS) { pe.Resampling = resample.Multinomial }},
		{"resample every iteration (ESS threshold 1)", func(pe *ParticleEMS) { pe.ESSThreshold = 1 }},
		{"never resample (ESS threshold 0)", func(pe *ParticleEMS) { pe.ESSThreshold = 0 }},
		{"window: burn-in 10 (average 40 iterations)", func(pe *ParticleEMS) { pe.BurnIn = 10 }},
		{"window: burn-in 40 (average 10 iterations)", func(pe *ParticleEMS) { pe.BurnIn = 40 }},
		{"window: last iteration only (burn-in 49)", func(pe *ParticleEMS) { pe.BurnIn, pe.Batches = 49, 1 }},
		{"raw estimate (splat after mutation, not Rao-Blackwellised)", func(pe *ParticleEMS) { pe.RawEstimate = true }},
		{"4 replicate clouds of K/4 (the default SE method)", func(pe *ParticleEMS) { pe.Replicates = 4 }},
	}
	for _, s := range scenes {
		off := (s.n - n) / 2
		crop := func(p []float32) []float32 {
			out := make([]float32, n*n)
			for y := 0; y < n; y++ {
				copy(out[y*n:(y+1)*n], p[(off+y)*s.n+off:])
			}
			return out
		}
		d, ref := crop(s.obs), crop(s.ref)
		sk := conv.SmoothingKernel(DefaultSmooth)
		g := &GridEMS{H: conv.New(s.k), S: conv.NewSeparable(sk, sk), Iterations: DefaultIterations}
		gf := make([]float32, n*n)
		var ws Workspace
		g.Solve(context.Background(), &ws, &Problem{D: append([]float32(nil), d...), Mask: ones(n * n), W: n, H: n}, gf)
		fmt.Fprintf(md, "\nVariance reductions at K = 16, %s, 96x96 crop, smooth %.1f, 50 iterations; MC error = RMS over pixels of the spread over %d seeds; efficiency = baseline (error^2 x time) / variant's (> 1 is better); grid EMS at 50 iterations: PSNR %.2f dB:\n\n",
			s.name, DefaultSmooth, seeds, PSNR(ref, gf, nil, s.L))
		fmt.Fprintf(md, "| variant | MC error (DN) | time per run (ms) | efficiency | PSNR of the mean over seeds (dB) |\n|---|---|---|---|---|\n")
		var base float64
		for vi, v := range vs {
			sum, sq := make([]float64, n*n), make([]float64, n*n)
			var el time.Duration
			for seed := 0; seed < seeds; seed++ {
				pe := &ParticleEMS{H: conv.New(s.k), PSF: s.k, SmoothX: sk, SmoothY: sk, Iterations: DefaultIterations, PerPixel: 16,
					ESSThreshold: DefaultESSThreshold, BurnIn: DefaultIterations / 2, Batches: 5, Seed: uint64(seed + 1)}
				v.set(pe)
				f := make([]float32, n*n)
				t0 := time.Now()
				if _, err := pe.Solve(context.Background(), &ws, &Problem{D: append([]float32(nil), d...), Mask: ones(n * n), W: n, H: n}, f); err != nil {
					t.Fatal(err)
				}
				el += time.Since(t0)
				for i, x := range f {
					sum[i] += float64(x)
					sq[i] += float64(x) * float64(x)
				}
			}
			var v2 float64
			mean := make([]float32, n*n)
			for i := range sum {
				m := sum[i] / seeds
				mean[i] = float32(m)
				v2 += math.Max(0, sq[i]-seeds*m*m) / (seeds - 1) / float64(n*n)
			}
			ms := el.Seconds() * 1000 / seeds
			cost := v2 * ms
			if vi == 0 {
				base = cost
			}
			fmt.Fprintf(md, "| %s | %.2f | %.0f | %.2f | %.2f |\n", v.name, math.Sqrt(v2), ms, base/cost, PSNR(ref, mean, nil, s.L))
		}
	}
}
