package option

import (
	"fmt"
	"time"
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
