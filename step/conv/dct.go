package conv

import (
	"limpid/psf"
	"math"

	"gonum.org/v1/gonum/dsp/fourier"
)

// DCT2 is the orthonormal 2-D DCT-II (Ahmed, Natarajan & Rao, IEEE Trans.
// Computers C-23:90, 1974) of a w x h plane, computed by rows then columns
// with FFTPACK's quarter-wave transforms (gonum dsp/fourier). With
// half-sample symmetric boundaries a symmetric convolution is diagonal in
// this basis, which the risk estimate relies on.
type DCT2 struct {
	w, h   int
	tx, ty *fourier.QuarterWaveFFT
	ax, ay []float64 // orthonormal scales a_k per axis
	row    []float64
	cols   []float64 // dctBlock columns
	// fast is the float32 FFT route of Energy for 2,3,5-smooth sizes;
	// coef holds its coefficients (or, without it, the float64 ones).
	fast   *dct32
	coef   []float32
	coef64 []float64
}

const dctBlock = 16

// Fits reports whether the transform is for w x h planes.
func (d *DCT2) Fits(w, h int) bool { return d.w == w && d.h == h }

func NewDCT2(w, h int) *DCT2 {
	d := &DCT2{w: w, h: h, row: make([]float64, w), cols: make([]float64, dctBlock*h)}
	if w > 1 {
		d.tx = fourier.NewQuarterWaveFFT(w)
	}
	if h > 1 {
		d.ty = fourier.NewQuarterWaveFFT(h)
	}
	d.ax, d.ay = dctScales(w), dctScales(h)
	if w > 1 && h > 1 && Smooth235(w) && Smooth235(h) {
		d.fast, d.coef = newDCT32(w, h), make([]float32, w*h)
	}
	return d
}

// Energy returns sum (1 + wm1[i]) F[i]^2, F the orthonormal DCT-II of src:
// the risk estimate's per-iteration term, with its weights given minus one.
// By Parseval's theorem (the transform is orthonormal) it is computed as
// sum src^2 + sum wm1 F^2: the first sum in float64 on the pixels, the
// second on the coefficients, where the risk's weights are near one at the
// low frequencies that hold most of the energy (wm1 = -lambda / (h^2 +
// lambda) there), so the coefficients' rounding enters damped. For
// 2,3,5-smooth sizes F is computed in float32 through the FFT (dct32): on
// smooth relief, weighting F^2 directly by the float32 coefficients moved
// the choice between two near-equal bandwidths (DEVELOPERS.md, "The cost
// of the choice"); TestEnergyMatchesFloat64 bounds the error.
func (d *DCT2) Energy(wm1 []float64, src []float32) float64 {
	n := d.w * d.h
	var e float64
	for _, x := range src[:n] {
		e += float64(x) * float64(x)
	}
	if d.fast != nil {
		d.fast.forward(d.coef, src[:n])
		for i, x := range d.coef {
			e += wm1[i] * float64(x) * float64(x)
		}
		return e
	}
	if d.coef64 == nil {
		d.coef64 = make([]float64, n)
	}
	d.Forward(d.coef64, src)
	for i, x := range d.coef64 {
		e += wm1[i] * x * x
	}
	return e
}

func dctScales(n int) []float64 {
	a := make([]float64, n)
	for k := range a {
		a[k] = math.Sqrt(2 / float64(n))
	}
	a[0] = math.Sqrt(1 / float64(n))
	return a
}

// forward1 is the orthonormal DCT-II of v in place. FFTPACK's cosqb returns
// 4 sum_j x_j cos(pi k (2j+1) / 2n).
func forward1(t *fourier.QuarterWaveFFT, a, v []float64) {
	if t == nil {
		return
	}
	t.CosSequence(v, v)
	for k := range v {
		v[k] *= a[k] / 4
	}
}

// inverse1 is the orthonormal DCT-III (the inverse of forward1) of v in
// place. FFTPACK's cosqf returns y_0 + 2 sum_{k>=1} y_k cos(pi k (2j+1) / 2n).
func inverse1(t *fourier.QuarterWaveFFT, a, v []float64) {
	if t == nil {
		return
	}
	v[0] *= a[0]
	for k := 1; k < len(v); k++ {
		v[k] *= a[k] / 2
	}
	t.CosCoefficients(v, v)
}

// Forward writes the DCT-II of src (row-major w x h) into dst.
func (d *DCT2) Forward(dst []float64, src []float32) {
	w, h := d.w, d.h
	for y := 0; y < h; y++ {
		r := d.row
		for x := range r {
			r[x] = float64(src[y*w+x])
		}
		forward1(d.tx, d.ax, r)
		copy(dst[y*w:(y+1)*w], r)
	}
	d.columns(dst, forward1)
}

// Inverse writes the inverse DCT of src into dst (both float64).
func (d *DCT2) Inverse(dst, src []float64) {
	w, h := d.w, d.h
	copy(dst[:w*h], src[:w*h])
	for y := 0; y < h; y++ {
		inverse1(d.tx, d.ax, dst[y*w:(y+1)*w])
	}
	d.columns(dst, inverse1)
}

func (d *DCT2) columns(p []float64, f func(*fourier.QuarterWaveFFT, []float64, []float64)) {
	w, h := d.w, d.h
	// Columns in blocks of dctBlock so that the gather and scatter read
	// and write contiguous runs of each row (cache-friendly).
	for x0 := 0; x0 < w; x0 += dctBlock {
		nb := min(dctBlock, w-x0)
		for y := 0; y < h; y++ {
			row := p[y*w+x0 : y*w+x0+nb]
			for j, v := range row {
				d.cols[j*h+y] = v
			}
		}
		for j := 0; j < nb; j++ {
			f(d.ty, d.ay, d.cols[j*h:(j+1)*h])
		}
		for y := 0; y < h; y++ {
			row := p[y*w+x0 : y*w+x0+nb]
			for j := range row {
				row[j] = d.cols[j*h+y]
			}
		}
	}
}

// Eigenvalues returns the DCT-II eigenvalues h(kx) h(ky) (generally
// sum h(dx,dy) cos(pi kx dx / w) cos(pi ky dy / h)) of the kernel on a
// w x h tile, and false when the kernel is not symmetric in x and in y
// separately (then the DCT does not diagonalise it).
func Eigenvalues(k *psf.Kernel, w, h int) ([]float64, bool) {
	rx, ry := k.Rx(), k.Ry()
	peak := 0.0
	for _, v := range k.Data {
		peak = math.Max(peak, math.Abs(v))
	}
	for dy := -ry; dy <= ry; dy++ {
		for dx := -rx; dx <= rx; dx++ {
			v := k.At(dx, dy)
			if math.Abs(v-k.At(-dx, dy)) > 1e-9*peak || math.Abs(v-k.At(dx, -dy)) > 1e-9*peak {
				return nil, false
			}
		}
	}
	// a[dy][kx] = sum_dx h(dx, dy) cos(pi kx dx / w), dy >= 0 only.
	a := make([]float64, (ry+1)*w)
	for dy := 0; dy <= ry; dy++ {
		for kx := 0; kx < w; kx++ {
			var s float64
			for dx := -rx; dx <= rx; dx++ {
				s += k.At(dx, dy) * math.Cos(math.Pi*float64(kx*dx)/float64(w))
			}
			a[dy*w+kx] = s
		}
	}
	lam := make([]float64, w*h)
	for ky := 0; ky < h; ky++ {
		for kx := 0; kx < w; kx++ {
			s := a[kx]
			for dy := 1; dy <= ry; dy++ {
				s += 2 * a[dy*w+kx] * math.Cos(math.Pi*float64(ky*dy)/float64(h))
			}
			lam[ky*w+kx] = s
		}
	}
	return lam, true
}

// RiskWeights are the DCT-domain weights of limpid's risk estimate for one
// tile size (step's auto.go): with h the PSF's DCT eigenvalues (Eigenvalues)
// and lambda a regularisation, Q2 = h^2 / (h^2 + lambda), G = h / (h^2 +
// lambda) and K = 1 / (h^2 + lambda); Radius is the PSF's.
type RiskWeights struct {
	Q2, G, K []float64
	// Q2m1 = Q2 - 1 and Km1 = K - 1, the forms DCT2.Energy takes: small
	// where the coefficients are large (low frequencies, h near 1).
	Q2m1, Km1 []float64
	Radius    int
}

// NewRiskWeights is RiskWeights for kernel k on w x h tiles; ok is false
// when the DCT does not diagonalise k (Eigenvalues).
func NewRiskWeights(k *psf.Kernel, w, h int, lambda float64) (*RiskWeights, bool) {
	lam, ok := Eigenvalues(k, w, h)
	if !ok {
		return nil, false
	}
	n := w * h
	rw := &RiskWeights{Q2: make([]float64, n), G: make([]float64, n), K: make([]float64, n), Q2m1: make([]float64, n), Km1: make([]float64, n), Radius: max(k.Rx(), k.Ry())}
	for i, l := range lam {
		den := l*l + lambda
		rw.Q2[i] = l * l / den
		rw.G[i] = l / den
		rw.K[i] = 1 / den
		rw.Q2m1[i], rw.Km1[i] = -lambda/den, (1-den)/den
	}
	return rw, true
}
