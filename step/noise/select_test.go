package noise

import (
	"math"
	"math/rand/v2"
	"sort"
	"testing"
)

// Source: the definition of the median (the middle order statistic, the
// mean of the two middle ones for an even count), computed by a full sort
// (Go's sort.Float64s): the selection must give the same value exactly,
// including on inputs with long runs of equal values and sorted runs.
func TestMedianMatchesSort(t *testing.T) {
	r := rand.New(rand.NewPCG(11, 12))
	for trial := 0; trial < 400; trial++ {
		n := 1 + r.IntN(300)
		v := make([]float64, n)
		for i := range v {
			switch trial % 4 {
			case 0:
				v[i] = r.NormFloat64()
			case 1:
				v[i] = float64(r.IntN(4)) // many ties
			case 2:
				v[i] = float64(i) // sorted
			default:
				v[i] = float64(n - i) // reversed
			}
		}
		s := append([]float64(nil), v...)
		sort.Float64s(s)
		want := s[n/2]
		if n%2 == 0 {
			want = 0.5 * (s[n/2-1] + s[n/2])
		}
		if got := Median(v); got != want {
			t.Fatalf("trial %d (n %d): Median %v, sorted middle %v", trial, n, got, want)
		}
	}
	if !math.IsNaN(Median(nil)) {
		t.Fatal("Median of nothing must be NaN")
	}
}

// Source: the definition of a stable sort (sort.SliceStable in Go's
// standard library): indices ordered by mean, ties in index order, with
// negative, zero and positive means.
func TestSortedByMeanIsStable(t *testing.T) {
	r := rand.New(rand.NewPCG(13, 14))
	mean := make([]float32, 5000)
	for i := range mean {
		mean[i] = float32(r.IntN(50)-10) / 9
	}
	mean[7] = float32(math.Copysign(0, -1)) // -0 sorts with +0 by value, ties by index
	want := make([]int, len(mean))
	for i := range want {
		want[i] = i
	}
	sort.SliceStable(want, func(a, b int) bool { return mean[want[a]] < mean[want[b]] })
	got := sortedByMean(mean)
	for i := range want {
		if got[i] != want[i] {
			t.Fatalf("position %d: index %d (mean %v), stable sort gives %d (mean %v)", i, got[i], mean[got[i]], want[i], mean[want[i]])
		}
	}
}
