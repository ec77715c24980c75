package conv

import (
	"math"

	"limpid/raster"
)

// The one float blur: a separable Gaussian blur of float64 planes with
// half-sample symmetric borders, used where a statistic needs a smoothed
// copy of a band (the noise model's local means and gradients, the
// assessment's band-limited noise measure).

// GaussianTaps is a point-sampled Gaussian of standard deviation sigma
// (pixels), truncated at 3 sigma and normalised to sum 1.
func GaussianTaps(sigma float64) []float64 {
	r := int(math.Ceil(3 * sigma))
	g := make([]float64, 2*r+1)
	var s float64
	for i := range g {
		d := float64(i - r)
		g[i] = math.Exp(-d * d / (2 * sigma * sigma))
		s += g[i]
	}
	for i := range g {
		g[i] /= s
	}
	return g
}

// MeanFilled returns d (n values) as float64 with invalid pixels replaced by
// the mean of the valid ones (valid nil: all valid); false when none is
// valid.
func MeanFilled(d []float32, valid []bool, n int) ([]float64, bool) {
	var mu float64
	nv := 0
	for i, v := range d[:n] {
		if valid == nil || valid[i] {
			mu += float64(v)
			nv++
		}
	}
	if nv == 0 {
		return nil, false
	}
	mu /= float64(nv)
	out := make([]float64, n)
	for i, v := range d[:n] {
		if valid == nil || valid[i] {
			out[i] = float64(v)
		} else {
			out[i] = mu
		}
	}
	return out, true
}

// Blur64 is a separable blur with half-sample symmetric borders. Each sum
// runs over the taps in order whether or not it meets a border, so the
// interior loops (no reflection) give the same bits as the reflected ones.
func Blur64(src []float64, w, h int, g []float64) []float64 {
	r := (len(g) - 1) / 2
	tmp, out := make([]float64, w*h), make([]float64, w*h)
	for y := 0; y < h; y++ {
		row, dst := src[y*w:(y+1)*w], tmp[y*w:(y+1)*w]
		for x := range dst {
			var a float64
			if x >= r && x+r < w {
				for k, gk := range g {
					a += gk * row[x-r+k]
				}
			} else {
				for k := -r; k <= r; k++ {
					a += g[k+r] * row[raster.Mirror(x+k, w)]
				}
			}
			dst[x] = a
		}
	}
	acc := make([]float64, w)
	for y := 0; y < h; y++ {
		for i := range acc {
			acc[i] = 0
		}
		// The same sum as per pixel, one tap (one source row) at a time.
		for k := -r; k <= r; k++ {
			gk, sr := g[k+r], tmp[raster.Mirror(y+k, h)*w:][:w]
			for x, v := range sr {
				acc[x] += gk * v
			}
		}
		copy(out[y*w:(y+1)*w], acc)
	}
	return out
}
