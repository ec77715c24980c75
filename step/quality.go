package step

import (
	"math"

	"limpid/raster"
)

// PSNR is 10 log10(L^2 / MSE) over pixels where valid is true (nil: all).
func PSNR(ref, img []float32, valid []bool, L float64) float64 {
	var se float64
	n := 0
	for i := range ref {
		if valid != nil && !valid[i] {
			continue
		}
		d := float64(img[i]) - float64(ref[i])
		se += d * d
		n++
	}
	if n == 0 {
		return math.NaN()
	}
	if se == 0 {
		return math.Inf(1)
	}
	return 10 * math.Log10(L*L/(se/float64(n)))
}

// SSIM is the structural similarity of Wang, Bovik, Sheikh & Simoncelli (IEEE
// TIP 13(4):600, 2004) with the paper's settings: K1 = 0.01, K2 = 0.03, an
// 11x11 Gaussian window of sigma 1.5 (radius 5), population covariances.
// Local statistics use half-sample symmetric boundaries; the map is averaged
// over pixels at least 5 from the border whose whole window is valid (nil:
// all pixels valid), as scikit-image crops its map.
func SSIM(ref, img []float32, valid []bool, w, h int, L float64) float64 {
	g := make([]float64, 11)
	var gs float64
	for i := range g {
		d := float64(i - 5)
		g[i] = math.Exp(-d * d / (2 * 1.5 * 1.5))
		gs += g[i]
	}
	for i := range g {
		g[i] /= gs
	}
	n := w * h
	x, y := make([]float64, n), make([]float64, n)
	xx, yy, xy := make([]float64, n), make([]float64, n), make([]float64, n)
	for i := 0; i < n; i++ {
		a, b := float64(ref[i]), float64(img[i])
		if valid != nil && !valid[i] {
			a, b = 0, 0
		}
		x[i], y[i], xx[i], yy[i], xy[i] = a, b, a*a, b*b, a*b
	}
	tmp := make([]float64, n)
	blur := func(p []float64) {
		for yy := 0; yy < h; yy++ {
			for xx := 0; xx < w; xx++ {
				var s float64
				for k := -5; k <= 5; k++ {
					s += g[k+5] * p[yy*w+raster.Mirror(xx+k, w)]
				}
				tmp[yy*w+xx] = s
			}
		}
		for yy := 0; yy < h; yy++ {
			for xx := 0; xx < w; xx++ {
				var s float64
				for k := -5; k <= 5; k++ {
					s += g[k+5] * tmp[raster.Mirror(yy+k, h)*w+xx]
				}
				p[yy*w+xx] = s
			}
		}
	}
	for _, p := range [][]float64{x, y, xx, yy, xy} {
		blur(p)
	}
	// Windows wholly valid: count invalid pixels in each 11x11 box.
	bad := make([]int32, n)
	if valid != nil {
		cnt := make([]int32, (w+1)*(h+1))
		for yy := 0; yy < h; yy++ {
			for xx := 0; xx < w; xx++ {
				v := int32(0)
				if !valid[yy*w+xx] {
					v = 1
				}
				cnt[(yy+1)*(w+1)+xx+1] = v + cnt[yy*(w+1)+xx+1] + cnt[(yy+1)*(w+1)+xx] - cnt[yy*(w+1)+xx]
			}
		}
		for yy := 5; yy < h-5; yy++ {
			for xx := 5; xx < w-5; xx++ {
				x0, y0, x1, y1 := xx-5, yy-5, xx+6, yy+6
				bad[yy*w+xx] = cnt[y1*(w+1)+x1] - cnt[y0*(w+1)+x1] - cnt[y1*(w+1)+x0] + cnt[y0*(w+1)+x0]
			}
		}
	}
	c1, c2 := (0.01*L)*(0.01*L), (0.03*L)*(0.03*L)
	var sum float64
	cnt := 0
	for yy0 := 5; yy0 < h-5; yy0++ {
		for xx0 := 5; xx0 < w-5; xx0++ {
			i := yy0*w + xx0
			if bad[i] != 0 {
				continue
			}
			mx, my := x[i], y[i]
			vx, vy, cxy := xx[i]-mx*mx, yy[i]-my*my, xy[i]-mx*my
			sum += ((2*mx*my + c1) * (2*cxy + c2)) / ((mx*mx + my*my + c1) * (vx + vy + c2))
			cnt++
		}
	}
	if cnt == 0 {
		return math.NaN()
	}
	return sum / float64(cnt)
}
