package level

import (
	"math"
	"sort"

	"limpid/raster"
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
	samples := make([][]float32, len(bands))
	for y := 0; y < m.Height; y += step {
		if err := src.ReadRows(y, y+1, bands, row); err != nil {
			return nil, err
		}
		for i := range bands {
			for _, v := range row[i] {
				if valid(i, v) {
					samples[i] = append(samples[i], v)
				}
			}
		}
	}
	out := make([]float64, len(bands))
	for i, s := range samples {
		if len(s) == 0 {
			continue
		}
		sort.Slice(s, func(a, b int) bool { return s[a] < s[b] })
		k := int(percentile / 100 * float64(len(s)-1))
		out[i] = math.Max(0, float64(s[k]))
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
