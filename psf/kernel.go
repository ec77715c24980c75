package psf

import (
	"errors"
	"fmt"
	"math"
)

// Kernel is a normalised, odd-sized 2-D PSF. Data is row-major, W*H values;
// Data[(dy+Ry)*W + dx+Rx] is the weight h(dx, dy) with which a source pixel at
// (x-dx, y-dy) contributes to the observed pixel (x, y) (a convolution kernel).
type Kernel struct {
	W, H int
	Data []float64
	// Separable kernels also carry their 1-D factors: Data[j*W+i] == Y[j]*X[i].
	X, Y []float64
}

// Rx is the horizontal radius (W-1)/2.
func (k *Kernel) Rx() int { return (k.W - 1) / 2 }

// Ry is the vertical radius (H-1)/2.
func (k *Kernel) Ry() int { return (k.H - 1) / 2 }

// At returns h(dx, dy), zero outside the support.
func (k *Kernel) At(dx, dy int) float64 {
	i, j := dx+k.Rx(), dy+k.Ry()
	if i < 0 || j < 0 || i >= k.W || j >= k.H {
		return 0
	}
	return k.Data[j*k.W+i]
}

// Separable reports whether the kernel carries exact 1-D factors.
func (k *Kernel) Separable() bool { return k.X != nil && k.Y != nil }

// Variance returns the second central moments (vx, vy) of the kernel.
func (k *Kernel) Variance() (vx, vy float64) {
	var mx, my float64
	for j := 0; j < k.H; j++ {
		for i := 0; i < k.W; i++ {
			v := k.Data[j*k.W+i]
			mx += v * float64(i-k.Rx())
			my += v * float64(j-k.Ry())
		}
	}
	for j := 0; j < k.H; j++ {
		for i := 0; i < k.W; i++ {
			v := k.Data[j*k.W+i]
			dx, dy := float64(i-k.Rx())-mx, float64(j-k.Ry())-my
			vx += v * dx * dx
			vy += v * dy * dy
		}
	}
	return vx, vy
}

// ErrKernel is wrapped by every kernel validation error.
var ErrKernel = errors.New("psf: invalid kernel")

// MaxKernelSize bounds kernel width and height (security: a text or raster
// kernel is checked before any large allocation).
const MaxKernelSize = 1025

// NewKernel validates raw weights (row-major, w*h) and returns a normalised
// kernel. It refuses even sizes, negative, NaN or infinite weights and a
// zero sum. Rank-one kernels are detected and get their 1-D factors.
//
// A sum that overflows float64 (weights near 1e308) is computed on the
// weights divided by the largest one (an exact scaling when that weight is a
// power of two, else one rounding per weight), so such a kernel is
// normalised like any other instead of becoming all zeros.
func NewKernel(w, h int, data []float64) (*Kernel, error) {
	if w <= 0 || h <= 0 || len(data) != w*h {
		return nil, fmt.Errorf("%w: size %dx%d does not match %d values", ErrKernel, w, h, len(data))
	}
	if w > MaxKernelSize || h > MaxKernelSize {
		return nil, fmt.Errorf("%w: size %dx%d exceeds the limit %d", ErrKernel, w, h, MaxKernelSize)
	}
	if w%2 == 0 || h%2 == 0 {
		return nil, fmt.Errorf("%w: size %dx%d is even; the PSF centre must be a pixel, use an odd width and height", ErrKernel, w, h)
	}
	var sum, peak float64
	for i, v := range data {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return nil, fmt.Errorf("%w: value %d (row %d, column %d) is not finite", ErrKernel, i, i/w+1, i%w+1)
		}
		if v < 0 {
			return nil, fmt.Errorf("%w: value %g at row %d, column %d is negative", ErrKernel, v, i/w+1, i%w+1)
		}
		sum += v
		peak = max(peak, v)
	}
	if !(peak > 0) {
		return nil, fmt.Errorf("%w: weights sum to zero", ErrKernel)
	}
	k := &Kernel{W: w, H: h, Data: make([]float64, len(data))}
	if math.IsInf(sum, 0) {
		// Every v/peak is in [0, 1], so their sum is at most w*h.
		sum = 0
		for _, v := range data {
			sum += v / peak
		}
		for i, v := range data {
			k.Data[i] = v / peak / sum
		}
	} else {
		for i, v := range data {
			k.Data[i] = v / sum
		}
	}
	for i, v := range k.Data {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return nil, fmt.Errorf("%w: weight %d (row %d, column %d) is not finite after normalising (sum %g)", ErrKernel, i, i/w+1, i%w+1, sum)
		}
	}
	k.detectSeparable()
	return k, nil
}

// detectSeparable sets X and Y when the kernel is rank one: it takes the row
// and column through the largest weight and checks the outer product.
func (k *Kernel) detectSeparable() {
	imax := 0
	for i, v := range k.Data {
		if v > k.Data[imax] {
			imax = i
		}
	}
	ci, cj := imax%k.W, imax/k.W
	c := k.Data[imax]
	x := make([]float64, k.W)
	y := make([]float64, k.H)
	var sx, sy float64
	for i := range x {
		x[i] = k.Data[cj*k.W+i]
		sx += x[i]
	}
	for j := range y {
		y[j] = k.Data[j*k.W+ci] / c
		sy += y[j]
	}
	// Data[j][i] ?= y[j]*x[i]; tolerance relative to the peak.
	const rankOneTol = 1e-9
	for j := 0; j < k.H; j++ {
		for i := 0; i < k.W; i++ {
			if math.Abs(k.Data[j*k.W+i]-y[j]*x[i]) > rankOneTol*c {
				return
			}
		}
	}
	for i := range x {
		x[i] /= sx
	}
	for j := range y {
		y[j] /= sy
	}
	k.X, k.Y = x, y
}

// newSeparable builds a kernel from two 1-D factors (each normalised here).
func newSeparable(x, y []float64) *Kernel {
	normalise(x)
	normalise(y)
	k := &Kernel{W: len(x), H: len(y), Data: make([]float64, len(x)*len(y)), X: x, Y: y}
	for j, vy := range y {
		for i, vx := range x {
			k.Data[j*k.W+i] = vy * vx
		}
	}
	return k
}

func normalise(v []float64) {
	var s float64
	for _, x := range v {
		s += x
	}
	for i := range v {
		v[i] /= s
	}
}

// KernelTransfer returns the real part of the kernel's DTFT at (fx, fy)
// cycles per pixel: sum h(dx, dy) cos(2 pi (fx dx + fy dy)) (for a symmetric
// kernel the whole transfer function; its modulus is the kernel's MTF).
func KernelTransfer(k *Kernel, fx, fy float64) float64 {
	var s float64
	for j := 0; j < k.H; j++ {
		for i := 0; i < k.W; i++ {
			s += k.Data[j*k.W+i] * math.Cos(2*math.Pi*(fx*float64(i-k.Rx())+fy*float64(j-k.Ry())))
		}
	}
	return s
}
