package plane

import (
	"math"

	"limpid/step/internal/vec"
)

// RelChange is sum|fn - f| / sum|f| (0 when f is zero); the sums are
// vec.L1Sums (8 float64 partial sums, vectorised where the CPU allows).
func RelChange(fn, f []float32) float64 {
	num, den := vec.L1Sums(fn, f)
	if den == 0 {
		return 0
	}
	return num / den
}

// LocalRMS writes into dst the root mean square of u over the valid pixels
// of the (2r+1)^2 window around each pixel (0 where the window holds none),
// by running sums along rows (into the scratch planes sum and cnt, len w*h)
// then along columns.
func LocalRMS(dst, u, mask []float32, w, h, r int, sum, cnt []float32) {
	for y := 0; y < h; y++ {
		row, m := u[y*w:(y+1)*w], mask[y*w:(y+1)*w]
		var s, c float64
		add := func(x int, sign float64) {
			if x >= 0 && x < w && m[x] != 0 {
				s += sign * float64(row[x]) * float64(row[x])
				c += sign
			}
		}
		for x := 0; x < r; x++ {
			add(x, 1)
		}
		for x := 0; x < w; x++ {
			add(x+r, 1)
			add(x-r-1, -1)
			sum[y*w+x], cnt[y*w+x] = float32(s), float32(c)
		}
	}
	for x := 0; x < w; x++ {
		var s, c float64
		add := func(y int, sign float64) {
			if y >= 0 && y < h {
				s += sign * float64(sum[y*w+x])
				c += sign * float64(cnt[y*w+x])
			}
		}
		for y := 0; y < r; y++ {
			add(y, 1)
		}
		for y := 0; y < h; y++ {
			add(y+r, 1)
			add(y-r-1, -1)
			if c > 0.5 {
				dst[y*w+x] = float32(math.Sqrt(max(s, 0) / c))
			} else {
				dst[y*w+x] = 0
			}
		}
	}
}

// Taper writes into dst the masked risk's weight: 0 on invalid pixels,
// rising smoothly with the distance d to the nearest invalid pixel to 1 at
// r pixels, sin^2(pi/2 min(d/r, 1)) (a raised-cosine edge, as tapered data
// windows in spectral estimation). A hard 0/1 weight would put a step into
// the masked prediction, which K (a regularised inverse of H^T H)
// amplifies: the error measure would then be dominated by the pixels along
// the mask's edge, where more iterations always fit better. The distance
// is the chamfer distance with weights 3 and 4 (3 per pixel; Borgefors,
// CVGIP 34(3):344-371, 1986), two passes; the tile's sides are not mask
// edges. dist (len w*h) is scratch.
func Taper(dst, mask []float32, w, h, r int, dist, _ []float32) {
	const far = float32(1 << 30)
	for i := range dist[:w*h] {
		if mask[i] == 0 {
			dist[i] = 0
		} else {
			dist[i] = far
		}
	}
	relax := func(i, j int, c float32) {
		if v := dist[j] + c; v < dist[i] {
			dist[i] = v
		}
	}
	for y := 0; y < h; y++ {
		for x := 0; x < w; x++ {
			i := y*w + x
			if x > 0 {
				relax(i, i-1, 3)
			}
			if y > 0 {
				relax(i, i-w, 3)
				if x > 0 {
					relax(i, i-w-1, 4)
				}
				if x < w-1 {
					relax(i, i-w+1, 4)
				}
			}
		}
	}
	for y := h - 1; y >= 0; y-- {
		for x := w - 1; x >= 0; x-- {
			i := y*w + x
			if x < w-1 {
				relax(i, i+1, 3)
			}
			if y < h-1 {
				relax(i, i+w, 3)
				if x < w-1 {
					relax(i, i+w+1, 4)
				}
				if x > 0 {
					relax(i, i+w-1, 4)
				}
			}
		}
	}
	for i := range dst[:w*h] {
		t := math.Min(1, float64(dist[i])/(3*float64(r)))
		v := math.Sin(math.Pi / 2 * t)
		dst[i] = float32(v * v)
	}
}

// TaperRadius is the half-width of the masked risk's taper for a PSF
// of radius r: twice the PSF's reach (measured on the nodata scenes of
// DEVELOPERS.md, "Nodata collars and footprints").
func TaperRadius(r int) int { return max(2, 2*r) }

// Grow returns b resized to n, reallocated (zeroed) only when its capacity
// is short; otherwise its contents are kept.
func Grow[T any](b []T, n int) []T {
	if cap(b) < n {
		return make([]T, n)
	}
	return b[:n]
}
