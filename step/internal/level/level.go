package level

import (
	"math"
	"sort"

	"limpid/raster"
	"limpid/step/internal/records"
)

// Background samples every k-th row (at most ~2000 rows) and returns the
// percentile (in %) of each band's valid pixels, floored at 0.
func Background(src raster.Reader, bands []int, valid func(band int, v float32) bool, percentile float64) ([]float64, error) {
	m := src.Meta()
	step := max(1, m.Height/2000)
	row := make([][]float32, len(bands))
	for i := range row {
		row[i] = make([]float32, m.Width)
	}
	// Of the samples only the smallest that can hold the percentile are
	// kept (that share of all sampled pixels, in a max-heap): the same value
	// as sorting them all, in bounded memory.
	rank := func(n int) int { return int(percentile / 100 * float64(n-1)) }
	keep := rank((m.Height+step-1)/step*m.Width) + 1
	low := make([]lowest, len(bands))
	for y := 0; y < m.Height; y += step {
		if err := src.ReadRows(y, y+1, bands, row); err != nil {
			return nil, err
		}
		for i := range bands {
			for _, v := range row[i] {
				if valid(i, v) {
					low[i].add(v, keep)
				}
			}
		}
	}
	out := make([]float64, len(bands))
	for i, lw := range low {
		if lw.n == 0 {
			continue
		}
		sort.Slice(lw.v, func(a, b int) bool { return lw.v[a] < lw.v[b] })
		out[i] = math.Max(0, float64(lw.v[rank(lw.n)]))
	}
	return out, nil
}

// Weighted is a value and its weight.
type Weighted struct{ V, W float64 }

// WeightedMedian is the smallest value at which the cumulative weight
// reaches half the total (x is sorted in place).
func WeightedMedian(x []Weighted) float64 {
	if len(x) == 0 {
		return math.NaN()
	}
	sort.Slice(x, func(i, j int) bool { return x[i].V < x[j].V })
	var tot float64
	for _, e := range x {
		tot += e.W
	}
	var acc float64
	for _, e := range x {
		acc += e.W
		if acc >= tot/2 {
			return e.V
		}
	}
	return x[len(x)-1].V
}

// LowMedian is the lower median (an element of the set, so a smoothed
// bandwidth stays one of the candidates).
func LowMedian(v []float64) float64 {
	sort.Float64s(v)
	return v[(len(v)-1)/2]
}

// lowest keeps the smallest of the values added (at most keep, a max-heap)
// and counts them all.
type lowest struct {
	v []float32
	n int
}

func (l *lowest) add(x float32, keep int) {
	l.n++
	h := l.v
	switch {
	case len(h) < keep:
		h = append(h, x)
		for i := len(h) - 1; i > 0 && h[(i-1)/2] < h[i]; i = (i - 1) / 2 {
			h[i], h[(i-1)/2] = h[(i-1)/2], h[i]
		}
	case x < h[0]:
		h[0] = x
		for i := 0; ; {
			c := 2*i + 1
			if c+1 < len(h) && h[c+1] > h[c] {
				c++
			}
			if c >= len(h) || h[c] <= h[i] {
				break
			}
			h[i], h[c] = h[c], h[i]
			i = c
		}
	}
	l.v = h
}

// SmoothTileMap fills every tile of an nc x nr grid with the median of the
// raw per-tile choices in its 3 x 3 neighbourhood (bandwidth and log
// iterations separately; the lower median of an even count), so that
// neighbouring tiles do not jump between very different settings; a tile
// with no chosen neighbour gets smooth and iterations.
func SmoothTileMap(raw map[[2]int]records.TileChoice, nc, nr int, smooth float64, iterations int) map[[2]int]records.TileChoice {
	out := map[[2]int]records.TileChoice{}
	for row := 0; row < nr; row++ {
		for col := 0; col < nc; col++ {
			var es, ks []float64
			for dy := -1; dy <= 1; dy++ {
				for dx := -1; dx <= 1; dx++ {
					if t, ok := raw[[2]int{col + dx, row + dy}]; ok {
						es = append(es, t.Smooth)
						ks = append(ks, math.Log(float64(t.Iterations)))
					}
				}
			}
			tc := records.TileChoice{Col: col, Row: row, Smooth: smooth, Iterations: iterations}
			if len(es) > 0 {
				tc.Smooth = LowMedian(es)
				tc.Iterations = max(1, int(math.Round(math.Exp(LowMedian(ks)))))
			}
			out[[2]int{col, row}] = tc
		}
	}
	return out
}
