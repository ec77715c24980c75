package settings

import (
	"fmt"
	"strconv"
	"strings"
)

// Stop rules of the final pass.
const (
	// StopFixed: every tile ran exactly Iterations (the particle method;
	// the automatic stop's chosen count).
	StopFixed = "fixed"
	// StopChange: a tile stopped when the relative L1 change fell below
	// Tolerance, or at Iterations.
	StopChange = "change"
	// StopDiscrepancy: a tile stopped at the first iterate whose residual
	// is within Tau^2 x its summed noise variance, or at Iterations.
	StopDiscrepancy = "discrepancy"
)

// How a value was set.
const (
	Given = "given" // as the job asked
	Auto  = "auto"  // chosen by the risk estimate
	// Fallback: the choice or a noise-based stop was asked but the band
	// has no noise model: the given bandwidth, the change stop at the
	// default tolerance, at most the default count.
	Fallback = "fallback"
)

// Band is what one band's final pass ran with.
type Band struct {
	// Smooth is the EMS smoothing bandwidth in pixels (0: Richardson-Lucy).
	Smooth float64 `json:"smooth"`
	// SmoothFrom is Given, Auto or Fallback.
	SmoothFrom string `json:"smooth_from"`
	// Stop is StopFixed, StopChange or StopDiscrepancy.
	Stop string `json:"stop"`
	// Iterations is the count every tile ran (StopFixed) or the cap.
	Iterations int `json:"iterations"`
	// IterationsFrom is Given, Auto or Fallback.
	IterationsFrom string `json:"iterations_from"`
	// Tolerance is the change rule's threshold (StopChange only).
	Tolerance float64 `json:"tolerance,omitempty"`
	// BurnIn is the particle method's discarded iterations (the rest are
	// averaged).
	BurnIn *int `json:"burn_in,omitempty"`
	// Noise is the noise model the discrepancy stop used.
	Noise *Noise `json:"noise,omitempty"`
	// Tiles holds every tile's bandwidth and count when they differ by
	// tile (--choose per-tile); Smooth and Iterations are then their lower
	// medians.
	Tiles []Tile `json:"tiles,omitempty"`
}

// Noise is a noise model var = A DN + B as a stop rule evaluated it.
type Noise struct {
	A     float64 `json:"a"`
	B     float64 `json:"b"`
	Floor float64 `json:"variance_floor"`
	// ClipHigh clips DN before the model is evaluated (0: no clip).
	ClipHigh float64 `json:"clip_high"`
	Tau      float64 `json:"tau"`
	Source   string  `json:"source"`
}

// Tile is one tile's settings (--choose per-tile).
type Tile struct {
	Col        int     `json:"col"`
	Row        int     `json:"row"`
	Smooth     float64 `json:"smooth"`
	Iterations int     `json:"iterations"`
}

// String is the band's settings in one line, e.g. "smooth 0.3 (auto);
// fixed 37 iterations (auto)".
func (b *Band) String() string {
	var s strings.Builder
	fmt.Fprintf(&s, "smooth %s (%s); %s", num(b.Smooth), b.SmoothFrom, b.StopText())
	if b.Tiles != nil {
		fmt.Fprintf(&s, "; per tile (%d tiles, medians shown)", len(b.Tiles))
	}
	return s.String()
}

// StopText is the stop rule with its count or cap, e.g. "fixed 37
// iterations (auto)" or "change below 0.0001, at most 50 iterations
// (given)".
func (b *Band) StopText() string {
	var s string
	switch b.Stop {
	case StopFixed:
		s = fmt.Sprintf("fixed %d iterations", b.Iterations)
		if b.BurnIn != nil {
			s += fmt.Sprintf(", burn-in %d", *b.BurnIn)
		}
	case StopChange:
		s = fmt.Sprintf("change below %s, at most %d iterations", num(b.Tolerance), b.Iterations)
	case StopDiscrepancy:
		s = fmt.Sprintf("discrepancy, at most %d iterations", b.Iterations)
		if n := b.Noise; n != nil {
			s += fmt.Sprintf(" (tau %s, var = %s DN + %s, floor %s)", num(n.Tau), num(n.A), num(n.B), num(n.Floor))
		}
	default:
		s = b.Stop
	}
	return s + " (" + b.IterationsFrom + ")"
}

func num(v float64) string { return strconv.FormatFloat(v, 'g', -1, 64) }
