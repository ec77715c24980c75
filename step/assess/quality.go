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
	return newSSIMReference(ref, valid, w, h, L).against(img)
}

// ssimReference is SSIM's reference side, computed once for comparing
// several images with one reference: the local means of x and x^2, the
// windows holding invalid pixels, and buffers for the image's moments.
type ssimReference struct {
	ref          []float32
	valid        []bool
	w, h         int
	c1, c2       float64
	mx, mxx      []float64
	my, myy, mxy []float64
	bad          []int32
}

func newSSIMReference(ref []float32, valid []bool, w, h int, L float64) *ssimReference {
	n := w * h
	s := &ssimReference{ref: ref, valid: valid, w: w, h: h, c1: (0.01 * L) * (0.01 * L), c2: (0.03 * L) * (0.03 * L),
		mx: make([]float64, n), mxx: make([]float64, n)}
	// The moments x, x^2 (0 on invalid pixels), blurred in place into
	// local means.
	for i := 0; i < n; i++ {
		a := float64(ref[i])
		if valid != nil && !valid[i] {
			a = 0
		}
		s.mx[i], s.mxx[i] = a, a*a
	}
	g := ssimWindow()
	for _, p := range [][]float64{s.mx, s.mxx} {
		copy(p, conv.Blur64(p, w, h, g))
	}
	s.bad = ssimInvalidWindows(valid, w, h)
	return s
}

// against is the SSIM of img against the reference; the map is averaged
// over pixels at least ssimRadius from the border whose whole window is
// valid.
func (s *ssimReference) against(img []float32) float64 {
	w, h, n := s.w, s.h, s.w*s.h
	if s.my == nil {
		s.my, s.myy, s.mxy = make([]float64, n), make([]float64, n), make([]float64, n)
	}
	// The moments y, y^2, x y (0 on invalid pixels), blurred in place
	// into local means.
	for i := 0; i < n; i++ {
		a, b := float64(s.ref[i]), float64(img[i])
		if s.valid != nil && !s.valid[i] {
			a, b = 0, 0
		}
		s.my[i], s.myy[i], s.mxy[i] = b, b*b, a*b
	}
	g := ssimWindow()
	for _, p := range [][]float64{s.my, s.myy, s.mxy} {
		copy(p, conv.Blur64(p, w, h, g))
	}
	var sum float64
	cnt := 0
	for row := ssimRadius; row < h-ssimRadius; row++ {
		for col := ssimRadius; col < w-ssimRadius; col++ {
			i := row*w + col
			if s.bad[i] != 0 {
				continue
			}
			ux, uy := s.mx[i], s.my[i]
			vx, vy, cxy := s.mxx[i]-ux*ux, s.myy[i]-uy*uy, s.mxy[i]-ux*uy
			sum += ((2*ux*uy + s.c1) * (2*cxy + s.c2)) / ((ux*ux + uy*uy + s.c1) * (vx + vy + s.c2))
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
