package main

import (
	"context"
	"flag"
	"fmt"
	"log"
	"math"
	"math/rand/v2"
	"os"
	"strings"
	"time"

	"limpid/psf"
	"limpid/raster"
	"limpid/step"
	"limpid/step/assess"
	"limpid/step/conv"
	"limpid/step/resample"
	synth "limpid/step/scene"
)

// scene is one scene of the measurements.
type scene struct {
	name     string
	ref, obs []float32
	valid    []bool
	n        int
	L        float64 // PSNR peak
	k        *psf.Kernel
}

func main() {
	out := flag.String("out", "", "also write the markdown tables to this file")
	size := flag.Int("n", 256, "scene size in pixels (at least 96)")
	flag.Parse()
	log.SetFlags(0)
	if *size < 96 {
		log.Fatal("-n must be at least 96")
	}
	scenes, err := scenes(*size)
	if err != nil {
		log.Fatal(err)
	}
	var md strings.Builder
	if err := costAccuracy(&md, scenes); err != nil {
		log.Fatal(err)
	}
	if err := variance(&md, scenes); err != nil {
		log.Fatal(err)
	}
	fmt.Print(md.String())
	if *out != "" {
		if err := os.WriteFile(*out, []byte(md.String()), 0o644); err != nil {
			log.Fatal(err)
		}
	}
}

func scenes(n int) ([]scene, error) {
	k, err := psf.GaussianIso(1.4) // the demo's PSF
	if err != nil {
		return nil, err
	}
	H := conv.New(k)
	rng := rand.New(rand.NewPCG(2026, 3))
	bands, valid := synth.ValleyReference(n, n)
	red := bands[2]
	obs := synth.Degrade(red, valid, n, n, H, synth.Sensor{Gain: 0.4, Read: 3}, rng)
	for i, v := range obs {
		if valid[i] {
			obs[i] = float32(math.Min(4095, math.Max(1, math.Round(float64(v)))))
		}
	}
	night := synth.NightReference(n, n)
	all := make([]bool, n*n)
	for i := range all {
		all[i] = true
	}
	nobs := synth.Degrade(night, all, n, n, H, synth.Sensor{Gain: 1}, rng) // photon counts only
	var peak, mean float64
	for _, v := range night {
		peak = math.Max(peak, float64(v))
		mean += float64(v) / float64(n*n)
	}
	log.Printf("night scene: mean %.2f counts per pixel, peak %.0f", mean, peak)
	return []scene{
		{name: "Brannock Vale red band (demo scene)", ref: red, obs: obs, valid: valid, n: n, L: 4095, k: k},
		{name: "Quillhaven harbour at night (photon counts)", ref: night, obs: nobs, valid: all, n: n, L: peak, k: k},
	}, nil
}

func (s scene) mem() *raster.Mem {
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

// restore runs step.Restore on one band in memory.
func restore(src *raster.Mem, cfg step.Config) (*raster.Mem, *step.Report, error) {
	dst := raster.NewMem(src.Meta())
	rep, err := step.Restore(context.Background(), src, []int{0}, dst, cfg)
	return dst, rep, err
}

// costAccuracy writes the table of grid and particle runs on whole synth.
func costAccuracy(md *strings.Builder, scenes []scene) error {
	fmt.Fprintf(md, "Cost and accuracy, %dx%d, one tile, one worker, PSF gaussian:sigma=1.4, smooth %.1f, %d iterations (particle: burn-in %d, standard error from replicate clouds):\n\n",
		scenes[0].n, scenes[0].n, step.DefaultSmooth, step.DefaultIterations, step.DefaultIterations/2)
	fmt.Fprintf(md, "| scene | method | PSNR (dB) | wall (s) | mean reported SE | SE / signal |\n|---|---|---|---|---|---|\n")
	for _, s := range scenes {
		src := s.mem()
		fmt.Fprintf(md, "| %s | observed | %.2f | | | |\n", s.name, assess.PSNR(s.ref, s.obs, s.valid, s.L))
		cfg := step.Config{PSF: s.k, PSFSpec: "gaussian:sigma=1.4", Smooth: step.DefaultSmooth, Iterations: step.DefaultIterations,
			Tolerance: step.DefaultTolerance, Tile: 512, Workers: 1, Seed: 1} // Overlap 0: the automatic halo
		for _, tol := range []float64{step.DefaultTolerance, 0} {
			c := cfg
			c.Tolerance = tol
			out, rep, err := restore(src, c)
			if err != nil {
				return err
			}
			fmt.Fprintf(md, "| | grid (tolerance %g, %d iterations) | %.2f | %.2f | | |\n", tol, rep.Bands[0].MaxIterations, assess.PSNR(s.ref, out.Bands[0], s.valid, s.L), rep.WallSeconds)
		}
		for _, run := range []struct{ K, burn int }{{1, -1}, {4, -1}, {16, -1}, {64, -1}, {16, 10}, {64, 10}} {
			c := cfg
			c.Method = "particle"
			c.Particle = step.DefaultParticle()
			c.Particle.PerPixel = run.K
			c.Particle.Replicates = 0
			c.Particle.BurnIn = run.burn
			c.Uncertainty = raster.NewMem(src.Meta())
			out, rep, err := restore(src, c)
			if err != nil {
				return err
			}
			pb := rep.Particle.Bands[0]
			fmt.Fprintf(md, "| | particle K=%d, burn-in %d (%s) | %.2f | %.2f | %.2f | %.1f %% |\n", run.K, rep.Particle.BurnIn, rep.Particle.SEMethod,
				assess.PSNR(s.ref, out.Bands[0], s.valid, s.L), rep.WallSeconds, pb.MeanSE, 100*pb.RelativeSE)
		}
	}
	return nil
}

// variant is one change to the baseline particle solver.
type variant struct {
	name string
	set  func(pe *step.ParticleEMS)
}

var variants = []variant{
	{"baseline: exact potential, stratified, ESS 0.5, burn-in 25 of 50, Rao-Blackwellised estimate, one cloud", func(pe *step.ParticleEMS) {}},
	{"sampled potential", func(pe *step.ParticleEMS) { pe.Potential = step.PotentialSampled }},
	{"systematic resampling", func(pe *step.ParticleEMS) { pe.Resampling = resample.Systematic }},
	{"residual resampling", func(pe *step.ParticleEMS) { pe.Resampling = resample.Residual }},
	{"multinomial resampling", func(pe *step.ParticleEMS) { pe.Resampling = resample.Multinomial }},
	{"resample every iteration (ESS threshold 1)", func(pe *step.ParticleEMS) { pe.ESSThreshold = 1 }},
	{"never resample (ESS threshold 0)", func(pe *step.ParticleEMS) { pe.ESSThreshold = 0 }},
	{"window: burn-in 10 (average 40 iterations)", func(pe *step.ParticleEMS) { pe.BurnIn = 10 }},
	{"window: burn-in 40 (average 10 iterations)", func(pe *step.ParticleEMS) { pe.BurnIn = 40 }},
	{"window: last iteration only (burn-in 49)", func(pe *step.ParticleEMS) { pe.BurnIn, pe.Batches = 49, 1 }},
	{"raw estimate (splat after mutation, not Rao-Blackwellised)", func(pe *step.ParticleEMS) { pe.RawEstimate = true }},
	{"4 replicate clouds of K/4 (the default SE method)", func(pe *step.ParticleEMS) { pe.Replicates = 4 }},
}

// variance measures the Monte Carlo error of the variants at K = 16 on a
// 96x96 crop of each scene: the RMS over pixels of the spread over 8 runs.
func variance(md *strings.Builder, scenes []scene) error {
	const n = 96
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
		sk := conv.SmoothingKernel(step.DefaultSmooth)
		g := &step.GridEMS{H: conv.New(s.k), S: conv.NewSeparable(sk, sk), Iterations: step.DefaultIterations}
		gf := make([]float32, n*n)
		if _, err := g.Solve(context.Background(), &step.Workspace{}, &step.Problem{D: append([]float32(nil), d...), Mask: ones(n * n), W: n, H: n}, gf); err != nil {
			return err
		}
		fmt.Fprintf(md, "\nVariance reductions at K = 16, %s, 96x96 crop, smooth %.1f, 50 iterations; MC error = RMS over pixels of the spread over %d runs; efficiency = baseline (error^2 x time) / variant's (> 1 is better); grid EMS at 50 iterations: PSNR %.2f dB:\n\n",
			s.name, step.DefaultSmooth, mcRuns, assess.PSNR(ref, gf, nil, s.L))
		fmt.Fprintf(md, "| variant | MC error (DN) | time per run (ms) | efficiency | PSNR of the mean over runs (dB) |\n|---|---|---|---|---|\n")
		var base float64
		for vi, v := range variants {
			mcErr, ms, mean, err := mcError(s.k, d, n, v)
			if err != nil {
				return err
			}
			cost := mcErr * mcErr * ms
			if vi == 0 {
				base = cost
			}
			fmt.Fprintf(md, "| %s | %.2f | %.0f | %.2f | %.2f |\n", v.name, mcErr, ms, base/cost, assess.PSNR(ref, mean, nil, s.L))
		}
	}
	return nil
}

// mcRuns is the number of independent runs per variant.
const mcRuns = 8

// mcError runs one variant mcRuns times on d and returns the RMS over
// pixels of the spread over runs, the time per run (ms) and the mean image.
func mcError(k *psf.Kernel, d []float32, n int, v variant) (float64, float64, []float32, error) {
	sk := conv.SmoothingKernel(step.DefaultSmooth)
	sum, sq := make([]float64, n*n), make([]float64, n*n)
	var el time.Duration
	var ws step.Workspace
	for r := 0; r < mcRuns; r++ {
		pe := &step.ParticleEMS{H: conv.New(k), PSF: k, SmoothX: sk, SmoothY: sk, Iterations: step.DefaultIterations, PerPixel: 16,
			ESSThreshold: step.DefaultESSThreshold, BurnIn: step.DefaultIterations / 2, Batches: 5, Seed: uint64(r + 1)}
		v.set(pe)
		f := make([]float32, n*n)
		t0 := time.Now()
		if _, err := pe.Solve(context.Background(), &ws, &step.Problem{D: append([]float32(nil), d...), Mask: ones(n * n), W: n, H: n}, f); err != nil {
			return 0, 0, nil, err
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
		m := sum[i] / mcRuns
		mean[i] = float32(m)
		v2 += math.Max(0, sq[i]-mcRuns*m*m) / (mcRuns - 1) / float64(n*n)
	}
	return math.Sqrt(v2), el.Seconds() * 1000 / mcRuns, mean, nil
}

func ones(n int) []float32 {
	m := make([]float32, n)
	for i := range m {
		m[i] = 1
	}
	return m
}
