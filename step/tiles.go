package step

import (
	"fmt"
	"math"

	"limpid/raster"
)

// Span is a tile's core [Start, End) along one axis.
type Span struct{ Start, End int }

// Len is End - Start.
func (s Span) Len() int { return s.End - s.Start }

// Plan is the tile layout of a scene: cores of Tile pixels (the last one per
// axis may be longer, see Split), each read with Overlap pixels of halo and
// blended over Blend pixels on each side of every inner tile border.
type Plan struct {
	W, H                 int
	Tile, Overlap, Blend int
	Cols, Rows           []Span
}

// Split cuts [0, n) into cores of size tile; a last core shorter than 2*blend
// is merged into its neighbour so the blending ramps of one tile never
// overlap each other (the weights then sum to 1 everywhere).
func Split(n, tile, blend int) []Span {
	var out []Span
	for a := 0; a < n; a += tile {
		out = append(out, Span{a, min(a+tile, n)})
	}
	if k := len(out); k > 1 && out[k-1].Len() < 2*blend {
		out[k-2].End = n
		out = out[:k-1]
	}
	return out
}

// NewPlan validates the tile and overlap sizes and lays out the scene. The
// blend half-width is Overlap/2: the ramps sit where every tile still has half
// its halo of real context.
func NewPlan(w, h, tile, overlap int) (Plan, error) {
	if tile < 16 || tile > 16384 {
		return Plan{}, fmt.Errorf("tile size %d must be between 16 and 16384 pixels", tile)
	}
	if overlap < 0 || overlap > tile {
		return Plan{}, fmt.Errorf("overlap %d must be between 0 and the tile size %d", overlap, tile)
	}
	p := Plan{W: w, H: h, Tile: tile, Overlap: overlap, Blend: overlap / 2}
	p.Cols = Split(w, tile, p.Blend)
	p.Rows = Split(h, tile, p.Blend)
	return p, nil
}

// NTiles is the number of tiles per band.
func (p Plan) NTiles() int { return len(p.Cols) * len(p.Rows) }

// OutSpan is the window a tile writes: its core widened by the blend width
// towards each neighbour.
func (p Plan) OutSpan(spans []Span, i int) Span {
	s := spans[i]
	if i > 0 {
		s.Start -= p.Blend
	}
	if i < len(spans)-1 {
		s.End += p.Blend
	}
	return s
}

// Weights fills wt (length OutSpan(spans, i).Len()) with the tile's blend
// weights along one axis: sin^2 up across the left border, cos^2 down across
// the right border, 1 elsewhere. Neighbouring tiles' weights sum to 1
// (sin^2 + cos^2 = 1), so the separable 2-D products do too (derived: the
// product of two partitions of unity is one).
func (p Plan) Weights(wt []float32, spans []Span, i int) {
	out := p.OutSpan(spans, i)
	s := spans[i]
	b := float64(p.Blend)
	for k := range wt {
		x := float64(out.Start + k)
		v := 1.0
		if i > 0 && x < float64(s.Start)+b {
			u := math.Pi / 2 * (x - (float64(s.Start) - b) + 0.5) / (2 * b)
			v *= math.Sin(u) * math.Sin(u)
		}
		if i < len(spans)-1 && x >= float64(s.End)-b {
			u := math.Pi / 2 * (x - (float64(s.End) - b) + 0.5) / (2 * b)
			v *= math.Cos(u) * math.Cos(u)
		}
		wt[k] = float32(v)
	}
}

// InSpan is the window a tile reads: its core widened by the halo on both
// sides (positions outside the scene are mirrored).
func (p Plan) InSpan(spans []Span, i int) Span {
	return Span{spans[i].Start - p.Overlap, spans[i].End + p.Overlap}
}

// sourceRange is the smallest range of real rows (or columns) that the
// mirrored window s of an axis of length n touches.
func sourceRange(s Span, n int) Span {
	lo, hi := n, 0
	for y := s.Start; y < s.End; y++ {
		m := raster.Mirror(y, n)
		lo, hi = min(lo, m), max(hi, m+1)
	}
	return Span{lo, hi}
}
