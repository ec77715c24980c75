package step

import (
	"math"

	"limpid/step/conv"
	"limpid/step/internal/option"
	"limpid/step/internal/records"
)

// The particle method's parameters and defaults live in
// step/internal/option (DEVELOPERS.md, "Particle EMS: cost and accuracy"
// has the measurements behind the defaults).
type ParticleConfig = option.ParticleConfig

// Defaults of the particle method (see option).
const (
	DefaultPerPixel, DefaultESSThreshold, DefaultBatches = option.DefaultPerPixel, option.DefaultESSThreshold, option.DefaultBatches
	DefaultResampling, DefaultPotential, DefaultStart    = option.DefaultResampling, option.DefaultPotential, option.DefaultStart
	maxParticlesPerTile                                  = option.MaxParticlesPerTile
)

// AutoReplicates and DefaultParticle: see option.
var (
	AutoReplicates  = option.AutoReplicates
	DefaultParticle = option.DefaultParticle
)

// resolveParticle fills defaults and validates the particle parameters
// against the iteration count; errors are FieldErrors.
func (cfg *Config) resolveParticle() error {
	pc := &cfg.Particle
	if *pc == (ParticleConfig{}) {
		*pc = DefaultParticle()
	}
	if pc.Batches == 0 {
		pc.Batches = DefaultBatches
	}
	if pc.BurnIn < 0 {
		pc.BurnIn = cfg.Iterations / 2
	}
	if pc.Replicates == 0 && pc.PerPixel > 0 {
		pc.Replicates = AutoReplicates(pc.PerPixel)
	}
	if pc.PerPixel <= 0 || pc.PerPixel > 65536 {
		return fieldErrorf("Particle.PerPixel", "{Particle.PerPixel} %d must be between 1 and 65536", pc.PerPixel)
	}
	if pc.Potential != PotentialExact && pc.Potential != PotentialSampled {
		return fieldErrorf("Particle.Potential", "{Particle.Potential} %d is not a Potential", pc.Potential)
	}
	if !pc.Resampling.Valid() {
		return fieldErrorf("Particle.Resampling", "{Particle.Resampling} %d is not a Resampling", pc.Resampling)
	}
	if pc.Start != StartFlat && pc.Start != StartObserved {
		return fieldErrorf("Particle.Start", "{Particle.Start} %d is not a Start", pc.Start)
	}
	if math.IsNaN(pc.ESSThreshold) || pc.ESSThreshold < 0 || pc.ESSThreshold > 1 {
		return fieldErrorf("Particle.ESSThreshold", "{Particle.ESSThreshold} %g must be between 0 and 1", pc.ESSThreshold)
	}
	if pc.BurnIn >= cfg.Iterations {
		return fieldErrorf("Particle.BurnIn", "{Particle.BurnIn} %d must be less than {Iterations} %d (the estimate averages the iterations after the burn-in)", pc.BurnIn, cfg.Iterations)
	}
	if pc.Replicates < 1 || pc.Replicates > pc.PerPixel || pc.PerPixel%pc.Replicates != 0 {
		return fieldErrorf("Particle.Replicates", "{Particle.Replicates} %d must divide {Particle.PerPixel} %d (each replicate cloud gets K/G particles per pixel)", pc.Replicates, pc.PerPixel)
	}
	if pc.Replicates == 1 && (pc.Batches < 2 || pc.Batches > cfg.Iterations-pc.BurnIn) {
		return fieldErrorf("Particle.Batches", "{Particle.Batches} %d must be between 2 and iterations - burn-in (%d)", pc.Batches, cfg.Iterations-pc.BurnIn)
	}
	side := int64(cfg.Tile) + 3*int64(cfg.Halo()) // core (a last one may be longer by 2 blend = overlap) plus halo
	if int64(pc.PerPixel)*side*side >= maxParticlesPerTile {
		return fieldErrorf("Particle.PerPixel", "{Particle.PerPixel} %d x tile %d (with halo) is more than 2^31 particles per tile: lower either", pc.PerPixel, cfg.Tile)
	}
	return nil
}

// newParticleSolver builds the ParticleEMS cfg describes (after Resolve).
func (cfg *Config) newParticleSolver() *ParticleEMS {
	pc := cfg.Particle
	k := conv.SmoothingKernel(cfg.Smooth)
	return &ParticleEMS{H: conv.New(cfg.PSF), PSF: cfg.PSF, SmoothX: k, SmoothY: k, Smooth: cfg.Smooth, Iterations: cfg.Iterations,
		PerPixel: pc.PerPixel, Potential: pc.Potential, Resampling: pc.Resampling, ESSThreshold: pc.ESSThreshold, BurnIn: pc.BurnIn,
		Start: pc.Start, Batches: pc.Batches, Replicates: pc.Replicates, Seed: cfg.Seed}
}

// ParticleReport (the particle method's parameters and per band the mean
// Monte Carlo standard error) and ParticleBandReport are defined in
// step/internal/records.
type (
	ParticleReport     = records.Particle
	ParticleBandReport = records.ParticleBand
)

// SEBlendRule documents how tile standard errors are combined.
const SEBlendRule = "sqrt(sum_t w_t^2 se_t^2): blend weights w_t of the image, tiles' Monte Carlo errors independent"
