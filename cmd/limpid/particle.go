package main

import (
	"fmt"
	"math"
	"path/filepath"
	"strconv"

	"github.com/urfave/cli/v2"

	"limpid/raster"
	"limpid/raster/gdal"
	"limpid/step"
	"limpid/step/product"
	"limpid/step/resample"
)

// particleFlags are restore's flags for --method particle.
func particleFlags() []cli.Flag {
	return []cli.Flag{
		&cli.IntFlag{Name: "particles-per-pixel", Value: step.DefaultPerPixel, Usage: "particle method: particles per valid pixel K (cost and memory grow with K, Monte Carlo error falls as 1/sqrt(K))"},
		&cli.StringFlag{Name: "potential", Value: step.DefaultPotential.String(), Usage: "particle method: exact (potential integrated on the grid) or sampled (one PSF draw per particle)"},
		&cli.StringFlag{Name: "resampling", Value: step.DefaultResampling.String(), Usage: "particle method: stratified, systematic, residual or multinomial"},
		&cli.Float64Flag{Name: "ess-threshold", Value: step.DefaultESSThreshold, Usage: "particle method: resample when the effective sample size falls below this fraction of the particles (0-1)"},
		&cli.StringFlag{Name: "burn-in", Value: "auto", Usage: "particle method: iterations discarded before averaging (auto = half of --iterations)"},
		&cli.StringFlag{Name: "start", Value: step.DefaultStart.String(), Usage: "particle method: flat (uniform over the valid pixels) or observed (drawn from the data)"},
		&cli.IntFlag{Name: "batches", Value: step.DefaultBatches, Usage: "particle method: batch means for the Monte Carlo standard error (2 - iterations after burn-in)"},
		&cli.IntFlag{Name: "replicates", Value: 0, Usage: "particle method: independent clouds whose spread gives the standard error (must divide --particles-per-pixel; 1 = one cloud with batch means; 0 = auto: 4, 2 or 1)"},
		&cli.StringFlag{Name: "uncertainty", Usage: "write a per-pixel error map (DN, float32, same grid and bands, NaN nodata) to this raster: with the grid method the standard deviation the data noise causes (the band's noise model propagated through the restoration); with the particle method the total sqrt(noise^2 + mc^2) of that data-noise part and its Monte Carlo standard error (the report gives both parts' means). Neither holds PSF or noise-model errors"},
	}
}

// parseParticle reads the particle flags into cfg (validated by Resolve).
func parseParticle(c *cli.Context, cfg *step.Config, j *restoreJob) error {
	j.uncPath = c.String("uncertainty")
	// A negative count or fraction is refused whichever method runs (the
	// grid method does not read these flags).
	switch {
	case c.Int("particles-per-pixel") < 0:
		return usagef("--particles-per-pixel %d must be at least 1", c.Int("particles-per-pixel"))
	case c.Int("batches") < 0:
		return usagef("--batches %d: give at least 2", c.Int("batches"))
	case c.Int("replicates") < 0:
		return usagef("--replicates %d must be >= 0 (0 = auto)", c.Int("replicates"))
	}
	if v := c.Float64("ess-threshold"); v < 0 {
		return usagef("--ess-threshold %g must be between 0 and 1", v)
	}
	if cfg.Method != step.MethodParticle {
		return nil
	}
	pc := step.ParticleConfig{PerPixel: c.Int("particles-per-pixel"), ESSThreshold: c.Float64("ess-threshold"),
		Batches: c.Int("batches"), BurnIn: -1, Replicates: c.Int("replicates")}
	var err error
	if pc.Potential, err = step.ParsePotential(c.String("potential")); err != nil {
		return fmt.Errorf("%w: --potential %v", step.ErrConfig, err)
	}
	if pc.Resampling, err = resample.Parse(c.String("resampling")); err != nil {
		return fmt.Errorf("%w: --resampling %v", step.ErrConfig, err)
	}
	if pc.Start, err = step.ParseStart(c.String("start")); err != nil {
		return fmt.Errorf("%w: --start %v", step.ErrConfig, err)
	}
	if b := c.String("burn-in"); b != "auto" {
		v, err := strconv.Atoi(b)
		if err != nil || v < 0 {
			return usagef("--burn-in %q: give a number of iterations >= 0 or auto", b)
		}
		pc.BurnIn = v
	}
	if pc.PerPixel <= 0 {
		return usagef("--particles-per-pixel %d must be at least 1", pc.PerPixel)
	}
	if pc.Batches == 0 {
		return usagef("--batches 0: give at least 2")
	}
	if pc.Replicates < 0 {
		return usagef("--replicates %d must be >= 0 (0 = auto)", pc.Replicates)
	}
	cfg.Particle = pc
	return nil
}

// checkUncertaintyPath refuses stdout, the INPUT or OUTPUT path and a missing
// directory for --uncertainty before any work is done.
func checkUncertaintyPath(j *restoreJob) error {
	if j.uncPath == "" {
		return nil
	}
	if j.uncPath == "-" {
		return usagef("--uncertainty -: stdout carries the image only; give a file")
	}
	if j.out != "-" {
		a, _ := filepath.Abs(j.out)
		b, _ := filepath.Abs(j.uncPath)
		if a == b {
			return usagef("--uncertainty %s is the OUTPUT: give another file", j.uncPath)
		}
	}
	if err := checkPaths(j.in, j.uncPath); err != nil {
		return usagef("--uncertainty: %v", err)
	}
	return nil
}

// createUncertainty prepares the standard-error raster: the output's grid
// and bands, float32, NaN nodata.
func createUncertainty(j *restoreJob, om raster.Meta) (*gdal.Writer, error) {
	if j.uncPath == "" {
		return nil, nil
	}
	return gdal.Create(j.uncPath, product.UncertaintyMeta(om), gdal.WriteOptions{Format: j.format, DataType: "Float32", NoData: math.NaN(), HasNoData: true})
}
