package step

import (
	"math"
	"math/rand/v2"
	"sort"
	"testing"

	"limpid/raster"
)

// TestAutoBackgroundBoundedIsExact: AutoBackground keeps only the smallest
// samples, and must give the value of the rule it states (the
// BackgroundPercentile of all sampled valid pixels, by sorting them all,
// floored at 0): checked against that rule written naively, on bands with
// many ties, without ties, with nodata, a row step above 1 (4100 rows) and an
// all-invalid band.
func TestAutoBackgroundBoundedIsExact(t *testing.T) {
	const w, h = 37, 4100
	meta := raster.Meta{Width: w, Height: h, Bands: make([]raster.BandInfo, 4)}
	src := raster.NewMem(meta)
	rng := rand.New(rand.NewPCG(3, 4))
	for i := range src.Bands[0] {
		src.Bands[0][i] = float32(rng.IntN(50))               // ties
		src.Bands[1][i] = float32(rng.NormFloat64()*30 + 200) // no ties
		src.Bands[2][i] = float32(rng.IntN(4000))
		if rng.IntN(3) == 0 {
			src.Bands[2][i] = 9 // nodata
		}
		src.Bands[3][i] = 9 // all nodata
	}
	valid := []ValidFunc{NewValid(0, false, 0, false), NewValid(0, false, 0, false), NewValid(9, true, 0, false), NewValid(9, true, 0, false)}
	got, err := AutoBackground(src, []int{0, 1, 2, 3}, valid)
	if err != nil {
		t.Fatal(err)
	}
	step := max(1, h/2000)
	for b := range 4 {
		var s []float32
		for y := 0; y < h; y += step {
			for _, v := range src.Bands[b][y*w : (y+1)*w] {
				if valid[b](v) {
					s = append(s, v)
				}
			}
		}
		want := 0.0
		if len(s) > 0 {
			sort.Slice(s, func(i, j int) bool { return s[i] < s[j] })
			want = math.Max(0, float64(s[int(BackgroundPercentile/100*float64(len(s)-1))]))
		}
		if got[b] != want {
			t.Errorf("band %d: %v, want %v (sorting every sample)", b+1, got[b], want)
		}
	}
}
