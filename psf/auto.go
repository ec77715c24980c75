package psf

import (
	"math"
	"sort"
)

// EdgeWindow is a window FindEdges proposes for MeasureEdge (X1, Y1
// exclusive), with the evidence that made it a candidate.
type EdgeWindow struct {
	X0, Y0, X1, Y1 int
	Vertical       bool
	AngleDeg       float64
	// Contrast is the step between the sides (DN); Score the step over the
	// scene's noise.
	Contrast, Score float64
}

// Auto search geometry: windows AutoAcross pixels across the edge and
// AutoAlong along it, on a grid of AutoStep pixels; the sides are judged on
// the pixels more than AutoSideGap pixels from the edge.
const (
	AutoAcross  = 32
	AutoAlong   = 48
	AutoStep    = 8
	AutoSideGap = 6
	// AutoMinScore is the least step / noise of a candidate (common
	// practice, no source: ISO 12233 asks for low-noise, well-exposed edges).
	AutoMinScore = 20
	// AutoMaxEdges bounds the number of windows returned.
	AutoMaxEdges = 32
)

// FindEdges searches a w x h plane (NaN = invalid) for straight edges
// between two uniform regions, AutoMinDeg..AutoMaxDeg off the pixel axes, in
// windows that MeasureEdge can use. For each window on a grid (both
// orientations) it takes, on every line across the edge, the position of the
// largest derivative; it keeps windows where these positions lie on a
// straight line (rms < 0.6 pixel) of the right angle through the window's
// middle, with one sign of step, a step at least AutoMinScore times the
// noise, and sides whose spread is at most max(3 noise, 5 % of the step).
// Overlapping candidates keep the best score. noise is the scene's pixel
// noise (DN); windows are returned best first.
func FindEdges(plane []float32, w, h int, noise float64) []EdgeWindow {
	var out []EdgeWindow
	for _, vertical := range []bool{true, false} {
		out = append(out, findOriented(plane, w, h, noise, vertical)...)
	}
	sort.Slice(out, func(i, j int) bool { return out[i].Score > out[j].Score })
	var kept []EdgeWindow
	for _, c := range out {
		overlap := false
		for _, k := range kept {
			if c.X0 < k.X1 && k.X0 < c.X1 && c.Y0 < k.Y1 && k.Y0 < c.Y1 {
				overlap = true
				break
			}
		}
		if !overlap {
			kept = append(kept, c)
		}
		if len(kept) == AutoMaxEdges {
			break
		}
	}
	return kept
}

// AutoMinDeg and AutoMaxDeg bound the angle of auto edges: the method's
// safe range (EdgeSafeMinDeg, EdgeSafeMaxDeg).
const (
	AutoMinDeg = EdgeSafeMinDeg
	AutoMaxDeg = EdgeSafeMaxDeg
)

// edgeAt reads a plane with u across the candidate edge and v along it.
type edgeAt func(u, v int) float64

// findOriented is FindEdges for one orientation: every window of the
// AutoStep grid whose edge positions (edgePositions) lie on a straight line
// of the right angle through the window's middle and whose sides are
// uniform (uniformSides).
func findOriented(plane []float32, w, h int, noise float64, vertical bool) []EdgeWindow {
	at := edgeAt(func(u, v int) float64 { return float64(plane[v*w+u]) })
	W, H := w, h
	if !vertical {
		at = func(u, v int) float64 { return float64(plane[u*w+v]) }
		W, H = h, w
	}
	const A, L = AutoAcross, AutoAlong
	var out []EdgeWindow
	pos := make([]float64, L)
	ys := make([]float64, L)
	for i := range ys {
		ys[i] = float64(i)
	}
	for v0 := 0; v0+L <= H; v0 += AutoStep {
		for u0 := 0; u0+A <= W; u0 += AutoStep {
			if !edgePositions(at, u0, v0, noise, pos) {
				continue
			}
			a, b, rms := lineFit(ys, pos)
			ang := math.Atan(b) * 180 / math.Pi
			if rms > 0.6 || math.Abs(ang) < AutoMinDeg || math.Abs(ang) > AutoMaxDeg {
				continue
			}
			mid := a + b*float64(L-1)/2
			if math.Abs(mid-float64(A)/2) > AutoStep/2+0.5 {
				continue
			}
			step, ok := uniformSides(at, u0, v0, a, b, noise)
			if !ok {
				continue
			}
			e := EdgeWindow{Vertical: vertical, AngleDeg: ang, Contrast: step, Score: step / noise}
			if vertical {
				e.X0, e.Y0, e.X1, e.Y1 = u0, v0, u0+A, v0+L
			} else {
				e.X0, e.Y0, e.X1, e.Y1 = v0, u0, v0+L, u0+A
			}
			out = append(out, e)
		}
	}
	return out
}

// edgePositions writes to pos, for each of the AutoAlong lines of the
// window at (u0, v0), the sub-pixel position across the window of the
// largest derivative (a parabola through the three central differences
// around it). It reports false for a window with a NaN, a line whose peak
// is within AutoSideGap of the window side or below 5 noise, or peaks of
// both signs.
func edgePositions(at edgeAt, u0, v0 int, noise float64, pos []float64) bool {
	const A, L = AutoAcross, AutoAlong
	sign := 0.0
	for j := 0; j < L; j++ {
		best, bu := 0.0, -1
		for u := 1; u < A-1; u++ {
			g := at(u0+u+1, v0+j) - at(u0+u-1, v0+j)
			if math.IsNaN(g) {
				return false
			}
			if math.Abs(g) > math.Abs(best) {
				best, bu = g, u
			}
		}
		// A step of AutoMinScore noise blurred by sigma <= 3 px
		// still changes by > 5 noise over 2 pixels (derived:
		// 20 (Phi(1/3) - Phi(-1/3)) = 5.2): cheaper rejection.
		if bu < AutoSideGap || bu >= A-AutoSideGap || math.Abs(best) < 5*noise {
			return false
		}
		s := math.Copysign(1, best)
		if sign == 0 {
			sign = s
		} else if s != sign {
			return false
		}
		// sub-pixel peak by a parabola through the three values
		gm := at(u0+bu, v0+j) - at(u0+bu-2, v0+j)
		gp := at(u0+bu+2, v0+j) - at(u0+bu, v0+j)
		off := 0.0
		if den := gm - 2*best + gp; den != 0 {
			off = math.Max(-0.5, math.Min(0.5, 0.5*(gm-gp)/den))
		}
		pos[j] = float64(bu) + off
	}
	return true
}

// uniformSides judges the sides of the window at (u0, v0) beyond
// AutoSideGap of the edge line u = a + b v: each must hold at least two
// lines' worth of pixels, their means must differ by at least AutoMinScore
// noise (the returned step), and each side's spread must be at most
// max(3 noise, 5 % of the step).
func uniformSides(at edgeAt, u0, v0 int, a, b, noise float64) (step float64, ok bool) {
	const A, L = AutoAcross, AutoAlong
	var n0, s0, q0, n1, s1, q1 float64
	for j := 0; j < L; j++ {
		xe := a + b*float64(j)
		for u := 0; u < A; u++ {
			d := float64(u) - xe
			v := at(u0+u, v0+j)
			switch {
			case d < -AutoSideGap:
				n0++
				s0 += v
				q0 += v * v
			case d > AutoSideGap:
				n1++
				s1 += v
				q1 += v * v
			}
		}
	}
	if n0 < 2*L || n1 < 2*L {
		return 0, false
	}
	m0, m1 := s0/n0, s1/n1
	sd0 := math.Sqrt(math.Max(q0/n0-m0*m0, 0))
	sd1 := math.Sqrt(math.Max(q1/n1-m1*m1, 0))
	step = math.Abs(m1 - m0)
	if step < AutoMinScore*noise {
		return 0, false
	}
	// Poisson noise grows with the level: allow 3 noise at the
	// scene's typical level plus the photon noise of a bright side
	// through the 5 % of the step.
	lim := math.Max(3*noise, 0.05*step)
	if sd0 > lim || sd1 > lim {
		return 0, false
	}
	return step, true
}
