package assess

import (
	"limpid/step/conv"
	"math"
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

// SSIM is the structural similarity of Wang, Bovik, Sheikh & Simoncelli
// (IEEE TIP 13(4):600-612, 2004) with the paper's settings: K1 = 0.01,
// K2 = 0.03, an 11x11 Gaussian window of sigma 1.5 (radius ssimRadius),
// population covariances. Local statistics use half-sample symmetric
// boundaries; the map is averaged over pixels at least ssimRadius from the
// border whose whole window is valid (nil: all pixels valid), as
// scikit-image crops its map.
func SSIM(ref, img []float32, valid []bool, w, h int, L float64) float64 {
	g := ssimWindow()
	n := w * h
	// The moments x, y, x^2, y^2, x y (0 on invalid pixels), blurred in
	// place into local means.
	mx, my := make([]float64, n), make([]float64, n)
	mxx, myy, mxy := make([]float64, n), make([]float64, n), make([]float64, n)
	for i := 0; i < n; i++ {
		a, b := float64(ref[i]), float64(img[i])
		if valid != nil && !valid[i] {
			a, b = 0, 0
		}
		mx[i], my[i], mxx[i], myy[i], mxy[i] = a, b, a*a, b*b, a*b
	}
	for _, p := range [][]float64{mx, my, mxx, myy, mxy} {
		copy(p, conv.Blur64(p, w, h, g))
	}
	bad := ssimInvalidWindows(valid, w, h)
	c1, c2 := (0.01*L)*(0.01*L), (0.03*L)*(0.03*L)
	var sum float64
	cnt := 0
	for row := ssimRadius; row < h-ssimRadius; row++ {
		for col := ssimRadius; col < w-ssimRadius; col++ {
			i := row*w + col
			if bad[i] != 0 {
				continue
			}
			ux, uy := mx[i], my[i]
			vx, vy, cxy := mxx[i]-ux*ux, myy[i]-uy*uy, mxy[i]-ux*uy
			sum += ((2*ux*uy + c1) * (2*cxy + c2)) / ((ux*ux + uy*uy + c1) * (vx + vy + c2))
			cnt++
		}
	}
	if cnt == 0 {
		return math.NaN()
	}
	return sum / float64(cnt)
}

// ssimRadius is the radius of SSIM's 11x11 window.
const ssimRadius = 5

// ssimWindow returns the normalised 1-D Gaussian of sigma 1.5 over
// [-ssimRadius, ssimRadius]; SSIM's window is its separable product.
func ssimWindow() []float64 {
	g := make([]float64, 2*ssimRadius+1)
	var gs float64
	for i := range g {
		d := float64(i - ssimRadius)
		g[i] = math.Exp(-d * d / (2 * 1.5 * 1.5))
		gs += g[i]
	}
	for i := range g {
		g[i] /= gs
	}
	return g
}

// ssimInvalidWindows counts the invalid pixels of the window around every
// pixel at least ssimRadius from the border (a summed-area table of the
// invalid pixels); all counts are 0 when valid is nil.
func ssimInvalidWindows(valid []bool, w, h int) []int32 {
	bad := make([]int32, w*h)
	if valid == nil {
		return bad
	}
	cnt := make([]int32, (w+1)*(h+1))
	for row := 0; row < h; row++ {
		for col := 0; col < w; col++ {
			v := int32(0)
			if !valid[row*w+col] {
				v = 1
			}
			cnt[(row+1)*(w+1)+col+1] = v + cnt[row*(w+1)+col+1] + cnt[(row+1)*(w+1)+col] - cnt[row*(w+1)+col]
		}
	}
	for row := ssimRadius; row < h-ssimRadius; row++ {
		for col := ssimRadius; col < w-ssimRadius; col++ {
			x0, y0, x1, y1 := col-ssimRadius, row-ssimRadius, col+ssimRadius+1, row+ssimRadius+1
			bad[row*w+col] = cnt[y1*(w+1)+x1] - cnt[y0*(w+1)+x1] - cnt[y1*(w+1)+x0] + cnt[y0*(w+1)+x0]
		}
	}
	return bad
}
