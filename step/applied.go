package step

import (
	"limpid/step/internal/level"
	"sort"

	"limpid/step/noise"
	"limpid/step/settings"
)

// applied reads what band b's final pass runs with from its solver s (the
// record cannot drift from the run). smoothAuto and stopAuto say whether
// the bandwidth and the count were to be chosen; nm is the band's noise
// model (without one the choice fell back to the given values).
func applied(s Solver, b int, smoothAuto, stopAuto bool, nm *noise.Model) *settings.Band {
	var a settings.Band
	if bs, ok := s.(*bandSolver); ok && bs.byTile != nil && bs.byTile[b] != nil {
		var tiles []settings.Tile
		var es []float64
		var ks []weighted
		for key, ts := range bs.byTile[b] {
			a = *applied(ts, b, false, false, nil)
			tiles = append(tiles, settings.Tile{Col: key[0], Row: key[1], Smooth: a.Smooth, Iterations: a.Iterations})
			es, ks = append(es, a.Smooth), append(ks, weighted{V: float64(a.Iterations), W: 1})
		}
		sort.Slice(tiles, func(i, j int) bool {
			return tiles[i].Row < tiles[j].Row || tiles[i].Row == tiles[j].Row && tiles[i].Col < tiles[j].Col
		})
		a.Smooth, a.Iterations, a.Tiles = level.LowMedian(es), int(level.WeightedMedian(ks)), tiles
	} else if ok {
		a = *applied(bs.byBand[b], b, false, false, nil)
	}
	switch s := s.(type) {
	case *GridEMS:
		a = settings.Band{Smooth: s.Smooth, Iterations: s.Iterations, Stop: settings.StopFixed}
		if n := s.Noise; n != nil {
			a.Stop, a.Noise = settings.StopDiscrepancy, &settings.Noise{A: n.A, B: n.B, Floor: n.Floor, ClipHigh: n.Hi, Tau: s.Tau, Source: n.Source}
		} else if s.Tolerance > 0 {
			a.Stop, a.Tolerance = settings.StopChange, s.Tolerance
		}
	case *ParticleEMS:
		burn := s.BurnIn
		a = settings.Band{Smooth: s.Smooth, Iterations: s.Iterations, Stop: settings.StopFixed, BurnIn: &burn}
	case *keptTile:
		a = settings.Band{Smooth: s.smooth, Iterations: s.res.Iterations, Stop: settings.StopFixed}
	}
	// A band whose noise model is unusable got the fixed fallback solver
	// (regulariser.fixed) whatever stop was asked, and the given bandwidth.
	fallback := nm != nil && nm.A+nm.B <= 0
	a.SmoothFrom, a.IterationsFrom = settings.Given, settings.Given
	if smoothAuto {
		a.SmoothFrom = settings.Auto
		if fallback {
			a.SmoothFrom = settings.Fallback
		}
	}
	if fallback {
		a.IterationsFrom = settings.Fallback
	} else if stopAuto {
		a.IterationsFrom = settings.Auto
	}
	return &a
}

// Applied is what every band's pass runs with when cfg (resolved) is
// restored tile by tile without the scene-wide choice (tile streams).
func (cfg *Config) Applied() *settings.Band { return applied(cfg.NewSolver(), 0, false, false, nil) }

// RecordedStop is the stop rule the records state for cfg: StopFixed for the
// particle method (it runs exactly Iterations), else cfg.Stop.
func (cfg *Config) RecordedStop() Stop {
	if cfg.Method == MethodParticle {
		return StopFixed
	}
	return cfg.Stop
}
