package psf

import (
	"fmt"
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

// ErrNoEdge is returned (wrapping ErrMeasure) by MeasureAuto when the plane
// holds no usable edge.
var ErrNoEdge = fmt.Errorf("%w: no usable edge (straight, high-contrast, %g-%g degrees off the axes, uniform sides)", ErrMeasure, AutoMinDeg, AutoMaxDeg)

// MinAutoNoise is the noise MeasureAuto uses when SceneNoise gives none
// (a noiseless or constant plane: 0 or NaN), so FindEdges' step / noise
// tests stay finite; any small positive value does (no source).
const MinAutoNoise = 1e-6

// AutoOptions tunes MeasureAuto; the zero value is the default.
type AutoOptions struct {
	// Noise is the plane's pixel noise (DN) that candidate edges are judged
	// against; 0 estimates it with SceneNoise (at least MinAutoNoise).
	Noise float64
}

// AutoEdge is one window FindEdges proposed and its measurement.
type AutoEdge struct {
	Window EdgeWindow
	Result *EdgeResult
}

// AutoResult is what MeasureAuto found.
type AutoResult struct {
	// Noise is the pixel noise (DN) the search used.
	Noise float64
	// Edges are the measured windows, best first (FindEdges' order).
	Edges []AutoEdge
	// Estimate combines the Edges (Combine, no point target).
	Estimate Estimate
}

// MeasureAuto measures the PSF from the straight edges of a w x h plane
// (row-major, NaN = invalid): FindEdges proposes windows, MeasureEdge
// measures each (ISO 12233:2017 e-SFR), and Combine merges the
// measurements. Windows MeasureEdge refuses are left out, and so are edges
// it measures beyond EdgeSafeMaxDeg with a warning. The Estimate's
// Measured.Spec is the PSF as a gaussian spec. Without a usable edge the
// result holds no edge and the error wraps ErrNoEdge.
func MeasureAuto(plane []float32, w, h int, opts AutoOptions) (AutoResult, error) {
	if w < 1 || h < 1 || len(plane) != w*h {
		return AutoResult{}, fmt.Errorf("psf: MeasureAuto: the plane has %d values for %dx%d pixels", len(plane), w, h)
	}
	noise := opts.Noise
	if noise == 0 {
		noise = SceneNoise(plane, w, h)
		if !(noise > 0) {
			noise = MinAutoNoise
		}
	}
	if !(noise > 0) || math.IsInf(noise, 0) {
		return AutoResult{}, fmt.Errorf("psf: MeasureAuto: AutoOptions.Noise %g must be positive and finite", noise)
	}
	res := AutoResult{Noise: noise}
	var measured []*EdgeResult
	for _, c := range FindEdges(plane, w, h, noise) {
		r, err := MeasureEdge(subPlane(plane, w, c.X0, c.Y0, c.X1, c.Y1), c.X1-c.X0, c.Y1-c.Y0)
		if err != nil || len(r.Warnings) > 0 && math.Abs(r.AngleDeg) > EdgeSafeMaxDeg {
			continue
		}
		res.Edges = append(res.Edges, AutoEdge{Window: c, Result: r})
		measured = append(measured, r)
	}
	res.Estimate = Combine(measured, nil)
	if len(res.Edges) == 0 {
		return res, ErrNoEdge
	}
	return res, nil
}

// subPlane copies the window x0..x1-1, y0..y1-1 of a plane w pixels wide.
func subPlane(plane []float32, w, x0, y0, x1, y1 int) []float32 {
	out := make([]float32, 0, (x1-x0)*(y1-y0))
	for y := y0; y < y1; y++ {
		out = append(out, plane[y*w+x0:y*w+x1]...)
	}
	return out
}
