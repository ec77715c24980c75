package psf

import (
	"math"
)

// Transfer functions of the sensor parts (f in cycles per pixel). Each is the
// real, even optical transfer function of a centred part, so its modulus is
// the part's MTF and the system transfer function is the product of the
// parts' (Boreman, "Modulation Transfer Function in Optical and Electro-Optical
// Systems", SPIE Press 2001, ch. 1-2).

// Sinc is the normalised sinc sin(pi x) / (pi x), 1 at 0.
func Sinc(x float64) float64 {
	if math.Abs(x) < 1e-8 {
		return 1 - math.Pi*math.Pi*x*x/6
	}
	return math.Sin(math.Pi*x) / (math.Pi * x)
}

// MTFGaussian is the transfer function of a Gaussian PSF of standard
// deviation sigma pixels: exp(-2 pi^2 sigma^2 f^2).
func MTFGaussian(f, sigma float64) float64 {
	return math.Exp(-2 * math.Pi * math.Pi * sigma * sigma * f * f)
}

// SigmaFromMTF returns the Gaussian standard deviation (pixels) whose MTF at
// frequency f (cycles per pixel) is m: sqrt(-2 ln m) / (2 pi f); at Nyquist
// (f = 0.5) sqrt(-2 ln m) / pi. It is NaN unless 0 < m < 1 and f > 0.
func SigmaFromMTF(m, f float64) float64 {
	if !(m > 0 && m < 1 && f > 0) {
		return math.NaN()
	}
	return math.Sqrt(-2*math.Log(m)) / (2 * math.Pi * f)
}

// MTFDetector is the transfer function of a square detector footprint of side
// a pixels (a = 1 is the full pixel aperture): sinc(a fx) sinc(a fy). Its
// modulus at Nyquist for a = 1 is 2/pi = 0.6366 per axis.
func MTFDetector(fx, fy, a float64) float64 {
	return Sinc(a*fx) * Sinc(a*fy)
}

// MTFMotion is the transfer function of a uniform linear smear of length l
// pixels along the direction angleDeg (from the column axis towards the row
// axis): sinc(l (fx cos a + fy sin a)).
func MTFMotion(fx, fy, l, angleDeg float64) float64 {
	th := angleDeg * math.Pi / 180
	return Sinc(l * (fx*math.Cos(th) + fy*math.Sin(th)))
}

// MTFCircular is the diffraction-limited transfer function of an
// aberration-free circular aperture with central obstruction ratio eps
// (0 <= eps < 1, 0 = clear aperture) at normalised frequency v = f / fc,
// fc = 1 / (lambda N). For eps = 0 it is (2/pi)(acos v - v sqrt(1 - v^2))
// (Goodman, "Introduction to Fourier Optics", 3rd ed., sec. 6.3); for eps > 0
// the annular-pupil form (O'Neill, JOSA 46:285, 1956), normalised to 1 at 0.
func MTFCircular(v, eps float64) float64 {
	v = math.Abs(v)
	if v >= 1 {
		return 0
	}
	a := (2 / math.Pi) * (math.Acos(v) - v*math.Sqrt(1-v*v))
	if eps <= 0 {
		return a
	}
	e2 := eps * eps
	var b float64
	if v < eps {
		w := v / eps
		b = (2 * e2 / math.Pi) * (math.Acos(w) - w*math.Sqrt(1-w*w))
	}
	var c float64
	switch {
	case v <= (1-eps)/2:
		c = -2 * e2
	case v < (1+eps)/2:
		phi := math.Acos((1 + e2 - 4*v*v) / (2 * eps))
		c = -2*e2 + (2*eps/math.Pi)*math.Sin(phi) + ((1+e2)/math.Pi)*phi -
			(2*(1-e2)/math.Pi)*math.Atan((1+eps)/(1-eps)*math.Tan(phi/2))
	}
	return math.Max(0, (a+b+c)/(1-e2))
}

// Cutoff returns the diffraction cut-off frequency in cycles per pixel for a
// wavelength and pixel pitch in micrometres and an f-number: pitch / (lambda N).
func Cutoff(wavelengthUM, fnumber, pitchUM float64) float64 {
	return pitchUM / (wavelengthUM * fnumber)
}
