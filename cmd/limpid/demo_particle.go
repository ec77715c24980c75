package main

import (
	"fmt"
	"io"
	"path/filepath"

	"github.com/urfave/cli/v2"

	"limpid/raster/gdal"
	"limpid/step"
	"limpid/step/assess"
	"limpid/step/scene"
)

// demoParticleRun is the demo's particle restoration.
type demoParticleRun struct {
	rep   *step.Report
	res   [][]float32
	paths []string
}

// demoParticle restores the demo scene with the particle method at K
// particles per pixel (nil, nil when K is 0), writing restored_particle.tif,
// uncertainty_particle.tif and report_particle.json.
func demoParticle(c *cli.Context, dir, obsPath string, grid step.Config, K int, stdout, stderr io.Writer) (*demoParticleRun, error) {
	if K == 0 {
		return nil, nil
	}
	cfg := grid
	// The particle method runs a fixed number of iterations at the
	// fixed default bandwidth (its cost and accuracy are measured there).
	cfg.SmoothAuto, cfg.Smooth, cfg.Stop, cfg.Iterations = false, step.DefaultSmooth, step.StopChange, step.DefaultIterations
	cfg.Method = "particle"
	cfg.Particle = step.DefaultParticle()
	cfg.Particle.PerPixel = K
	cfg.Particle.Replicates = 0
	if err := cfg.Resolve(); err != nil {
		return nil, err
	}
	resPath := filepath.Join(dir, "restored_particle.tif")
	uncPath := filepath.Join(dir, "uncertainty_particle.tif")
	repPath := filepath.Join(dir, "report_particle.json")
	j := &restoreJob{in: obsPath, out: resPath, format: gdal.GTiff, outType: "float32", cfg: cfg, reportPath: repPath, uncPath: uncPath}
	fmt.Fprintf(stderr, "limpid demo: restoring with particle EMS (%d particles per pixel, %d iterations, burn-in %d)\n",
		K, cfg.Iterations, cfg.Particle.BurnIn)
	rep, err := runRestore(c.Context, j, nil, stdout, stderr)
	if err != nil {
		return nil, err
	}
	_, res, err := readAll(resPath)
	if err != nil {
		return nil, err
	}
	return &demoParticleRun{rep: rep, res: res, paths: []string{resPath, uncPath, repPath}}, nil
}

// printSideBySide prints PSNR and SSIM of observed, grid and particle, and
// the means of the particle method's two error parts (uncertainty_particle.tif
// holds their total, sqrt(noise^2 + mc^2)).
func (p *demoParticleRun) printSideBySide(w io.Writer, ref, obs, grid [][]float32, valid []bool, n int) {
	pr := p.rep.Particle
	fmt.Fprintf(w, "particle EMS: K=%d, burn-in %d, %s, %.1f s; MC error = mean reported Monte Carlo standard error, noise = mean data-noise part\n",
		pr.PerPixel, pr.BurnIn, pr.SEMethod, p.rep.WallSeconds)
	fmt.Fprintf(w, "%-6s %24s %24s %17s %9s\n", "", "PSNR (dB)", "SSIM", "particle MC error", "noise")
	fmt.Fprintf(w, "%-6s %8s %7s %8s %8s %7s %8s %10s %6s %9s\n", "band", "observed", "grid", "particle", "observed", "grid", "particle", "DN", "%", "DN")
	for b, name := range scene.ValleyBands {
		fmt.Fprintf(w, "%-6s %8.2f %7.2f %8.2f %8.4f %7.4f %8.4f %10.2f %6.1f %9.2f\n", name,
			assess.PSNR(ref[b], obs[b], valid, demoDataMax), assess.PSNR(ref[b], grid[b], valid, demoDataMax), assess.PSNR(ref[b], p.res[b], valid, demoDataMax),
			assess.SSIM(ref[b], obs[b], valid, n, n, demoDataMax), assess.SSIM(ref[b], grid[b], valid, n, n, demoDataMax), assess.SSIM(ref[b], p.res[b], valid, n, n, demoDataMax),
			pr.Bands[b].MeanSE, 100*pr.Bands[b].RelativeSE, pr.Bands[b].MeanNoiseSE)
	}
	fmt.Fprintf(w, "particle outputs: %s, %s, %s\n", p.paths[0], p.paths[1], p.paths[2])
}
