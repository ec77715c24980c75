package psf

import (
	"fmt"
	"math"
)

// GaussianRadius is the support radius rule for Gaussian kernels: ceil(4
// sigma), at least 1. A 1-D Gaussian holds 99.994 % of its mass within 4
// sigma, so the 2-D square support holds more than 99.98 % (standard normal
// table).
func GaussianRadius(sigma float64) int {
	r := int(math.Ceil(4 * sigma))
	if r < 1 {
		r = 1
	}
	return r
}

// Gaussian1D returns the point-sampled, normalised 1-D Gaussian of standard
// deviation sigma (pixels) on offsets -r..r.
func Gaussian1D(sigma float64, r int) []float64 {
	v := make([]float64, 2*r+1)
	for i := range v {
		d := float64(i - r)
		v[i] = math.Exp(-0.5 * d * d / (sigma * sigma))
	}
	normalise(v)
	return v
}

// checkWidth checks a Gaussian standard deviation; key is the parameter
// as the specification names it (sigma, sx, sy).
func checkWidth(key string, v float64) error {
	if math.IsNaN(v) || v <= 0 || v > 100 {
		return fmt.Errorf("%w: gaussian %s=%g must be in (0, 100] pixels", ErrKernel, key, v)
	}
	return nil
}

// GaussianIso is an isotropic Gaussian PSF, point-sampled at pixel centres
// (separable).
func GaussianIso(sigma float64) (*Kernel, error) {
	return GaussianAniso(sigma, sigma, 0)
}

// GaussianAniso is an anisotropic Gaussian PSF with standard deviations sx
// along its first axis and sy along the second; angleDeg turns the first axis
// from the column (x) axis towards the row (y, downwards) axis. The kernel is
// point-sampled at pixel centres; angles that are multiples of 90 degrees give
// separable kernels.
func GaussianAniso(sx, sy, angleDeg float64) (*Kernel, error) {
	for _, s := range []struct {
		name string
		v    float64
	}{{"sx", sx}, {"sy", sy}} {
		if err := checkWidth(s.name, s.v); err != nil {
			return nil, err
		}
	}
	if math.IsNaN(angleDeg) || math.IsInf(angleDeg, 0) {
		return nil, fmt.Errorf("%w: gaussian angle=%g is not finite", ErrKernel, angleDeg)
	}
	a := math.Mod(angleDeg, 180)
	if a < 0 {
		a += 180
	}
	const axisTol = 1e-9
	switch {
	case math.Abs(a) < axisTol || math.Abs(a-180) < axisTol:
		return newSeparable(Gaussian1D(sx, GaussianRadius(sx)), Gaussian1D(sy, GaussianRadius(sy))), nil
	case math.Abs(a-90) < axisTol:
		return newSeparable(Gaussian1D(sy, GaussianRadius(sy)), Gaussian1D(sx, GaussianRadius(sx))), nil
	}
	th := a * math.Pi / 180
	c, s := math.Cos(th), math.Sin(th)
	// Radius per image axis from the rotated covariance.
	vx := c*c*sx*sx + s*s*sy*sy
	vy := s*s*sx*sx + c*c*sy*sy
	rx, ry := GaussianRadius(math.Sqrt(vx)), GaussianRadius(math.Sqrt(vy))
	w, h := 2*rx+1, 2*ry+1
	data := make([]float64, w*h)
	for j := 0; j < h; j++ {
		for i := 0; i < w; i++ {
			dx, dy := float64(i-rx), float64(j-ry)
			u := c*dx + s*dy
			v := -s*dx + c*dy
			data[j*w+i] = math.Exp(-0.5 * (u*u/(sx*sx) + v*v/(sy*sy)))
		}
	}
	return NewKernel(w, h, data)
}
