package step

import (
	"fmt"
	"math"

	"limpid/step/conv"
	"limpid/step/internal/records"
	"limpid/step/resample"
)

// Defaults of the particle method (DEVELOPERS.md, "Particle EMS: cost and
// accuracy" has the measurements behind them).
const (
	DefaultPerPixel     = 16
	DefaultESSThreshold = 0.5 // common practice, no source
	DefaultBatches      = 10
	DefaultResampling   = resample.Stratified
	DefaultPotential    = PotentialExact
	DefaultStart        = StartFlat
	// maxParticlesPerTile bounds one tile's cloud (resampling counts are
	// uint32; about 24 bytes per particle).
	maxParticlesPerTile = 1 << 31
)

// ParticleConfig holds the particle method's parameters (Config.Method
// "particle"). The zero value means every default; otherwise fields are taken
// as given except where a field says so.
type ParticleConfig struct {
	// PerPixel is K, particles per valid pixel (>= 1).
	PerPixel int
	// Potential is how the potential is evaluated (zero: PotentialExact).
	Potential Potential
	// Resampling is the resampling scheme (zero: resample.Stratified).
	Resampling resample.Scheme
	// ESSThreshold in [0, 1]: resample when ESS < ESSThreshold x N.
	ESSThreshold float64
	// BurnIn iterations are discarded before averaging; < 0 means half the
	// iterations.
	BurnIn int
	// Start is the initial cloud (zero: StartFlat).
	Start Start
	// Batches for the batch-means standard error (0 = DefaultBatches),
	// used when Replicates resolves to 1.
	Batches int
	// Replicates G: independent clouds whose spread gives the standard
	// error (PerPixel must be a multiple of G; 1 = one cloud with batch
	// means). 0 = auto: 4, else 2, else 1, the largest that divides
	// PerPixel.
	Replicates int
}

// AutoReplicates is the Replicates = 0 rule: the largest of 4, 2, 1 that
// divides K.
func AutoReplicates(k int) int {
	for _, g := range []int{4, 2} {
		if k%g == 0 {
			return g
		}
	}
	return 1
}

// DefaultParticle returns the default particle parameters.
func DefaultParticle() ParticleConfig {
	return ParticleConfig{PerPixel: DefaultPerPixel, Potential: DefaultPotential, Resampling: DefaultResampling,
		ESSThreshold: DefaultESSThreshold, BurnIn: -1, Start: DefaultStart, Batches: DefaultBatches}
}

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

func (pc ParticleConfig) seMethod() string {
	if pc.Replicates > 1 {
		return fmt.Sprintf("spread of %d independent replicate clouds", pc.Replicates)
	}
	return fmt.Sprintf("batch means (%d batches) over the averaging window", pc.Batches)
}
