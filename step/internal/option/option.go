package option

import (
	"fmt"
	"time"

	"limpid/step/resample"
)

// Potential selects how the particle method evaluates the EMS potential.
type Potential int

const (
	// PotentialExact integrates G(x) = sum_y g(y|x) h(y)/h_n(y) on the pixel
	// grid: G = (H^T r)/s with r = w d / h_n (Rao-Blackwellised).
	PotentialExact Potential = iota
	// PotentialSampled draws one Y from the PSF around each particle and
	// weights it by r(Y)/s(X), an unbiased estimate of the same G (the
	// published method's estimator, with h known on the grid).
	PotentialSampled
)

func (p Potential) String() string {
	if p == PotentialSampled {
		return "sampled"
	}
	return "exact"
}

// ParsePotential maps "exact" / "sampled" to a Potential.
func ParsePotential(s string) (Potential, error) {
	switch s {
	case "exact":
		return PotentialExact, nil
	case "sampled":
		return PotentialSampled, nil
	}
	return 0, fmt.Errorf("%q: use exact or sampled", s)
}

// Start selects the particle method's initial cloud.
type Start int

const (
	// StartFlat spreads PerPixel particles uniformly over every valid pixel.
	StartFlat Start = iota
	// StartObserved draws the particles from the observed image above
	// background (systematic sampling over the valid pixels).
	StartObserved
)

func (s Start) String() string {
	if s == StartObserved {
		return "observed"
	}
	return "flat"
}

// ParseStart maps "flat" / "observed" to a Start.
func ParseStart(s string) (Start, error) {
	switch s {
	case "flat":
		return StartFlat, nil
	case "observed":
		return StartObserved, nil
	}
	return 0, fmt.Errorf("%q: use flat or observed", s)
}

// Timing accumulates where a ParticleEMS spends its time (for the
// benchmark's split); nil in production.
type Timing struct {
	Splat, Convolution, Reweight, Resample, Mutate, Estimate time.Duration
	ParticleIterations                                       int64
	Resamplings                                              int
}

var discardTiming Timing

// OrDiscard is t, or a discarded Timing when t is nil.
func OrDiscard(t *Timing) *Timing {
	if t == nil {
		return &discardTiming
	}
	return t
}

// Defaults of the particle method (DEVELOPERS.md, "Particle EMS: cost and
// accuracy" has the measurements behind them).
const (
	DefaultPerPixel     = 16
	DefaultESSThreshold = 0.5 // common practice, no source
	DefaultBatches      = 10
	DefaultResampling   = resample.Stratified
	DefaultPotential    = PotentialExact
	DefaultStart        = StartFlat
	// MaxParticlesPerTile bounds one tile's cloud (resampling counts are
	// uint32; about 24 bytes per particle).
	MaxParticlesPerTile = 1 << 31
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

// SEMethod describes how the standard error is estimated.
func (pc ParticleConfig) SEMethod() string {
	if pc.Replicates > 1 {
		return fmt.Sprintf("spread of %d independent replicate clouds", pc.Replicates)
	}
	return fmt.Sprintf("batch means (%d batches) over the averaging window", pc.Batches)
}
