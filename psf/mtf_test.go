package psf

import (
	"math"
	"strings"
	"testing"
)

// Source: the Gaussian MTF exp(-2 pi^2 sigma^2 f^2), the Fourier transform
// of a Gaussian PSF (Goodman, Introduction to Fourier Optics, table 2.1),
// evaluated: sigma -> MTF at Nyquist 0.5 -> 0.2912, 0.6 -> 0.1692, 0.7 -> 0.0891,
// 1.0 -> 0.0072; MTF50 = 0.18739 / sigma. The values are given to 4
// decimals, hence the tolerance of half a unit in the last place.
func TestMTFGaussianValues(t *testing.T) {
	const tol4 = 5e-5
	for _, c := range []struct{ s, m float64 }{{0.5, 0.2912}, {0.6, 0.1692}, {0.7, 0.0891}, {1.0, 0.0072}} {
		if got := MTFGaussian(0.5, c.s); math.Abs(got-c.m) > tol4 {
			t.Errorf("sigma %g: MTF at Nyquist %.5f, want %.4f", c.s, got, c.m)
		}
		// Inverse formula sigma = sqrt(-2 ln MTF_N) / pi (same source),
		// exact up to float rounding.
		const roundTrip = 1e-12
		if got := SigmaFromMTF(MTFGaussian(0.5, c.s), 0.5); math.Abs(got-c.s) > roundTrip {
			t.Errorf("sigma %g: SigmaFromMTF %g", c.s, got)
		}
		// MTF50 = 0.18739 / sigma; 0.18739 is given to 5 digits.
		const tol5 = 2e-5
		if got := MTFGaussian(0.18739/c.s, c.s); math.Abs(got-0.5) > tol5 {
			t.Errorf("sigma %g: MTF at 0.18739/sigma = %g, want 0.5", c.s, got)
		}
	}
}

// Source: the transfer function of a box is the Fourier transform of the
// box (Boreman, MTF in Optical and Electro-Optical Systems, SPIE 2001,
// ch. 2): square detector pixel |sin(pi f)/(pi f)|, 0.6366 at Nyquist
// (2/pi); linear smear of l pixels |sinc(l f)|.
func TestMTFDetectorAndMotion(t *testing.T) {
	const tol4 = 5e-5 // 4 decimals given
	if got := MTFDetector(0.5, 0, 1); math.Abs(got-0.6366) > tol4 {
		t.Errorf("pixel aperture at Nyquist %.5f, want 0.6366", got)
	}
	const exact = 1e-12
	// A smear along x of 2 pixels has its first zero at f = 1/2 cycle/pixel;
	// turned 90 degrees it acts on fy only.
	if got := MTFMotion(0.5, 0, 2, 0); math.Abs(got) > exact {
		t.Errorf("smear 2 px at Nyquist %g, want 0", got)
	}
	if got := MTFMotion(0.3, 0.5, 2, 90); math.Abs(got) > exact {
		t.Errorf("smear 2 px at 90 deg, fy = 0.5: %g, want 0", got)
	}
	if got, want := MTFMotion(0.25, 0, 1, 0), math.Sin(math.Pi/4)/(math.Pi/4); math.Abs(got-want) > exact {
		t.Errorf("smear 1 px at 0.25: %g want %g", got, want)
	}
}

// Source: Goodman, Introduction to Fourier Optics, sec. 6.3: the
// diffraction-limited OTF of a circular pupil
// (2/pi)(acos v - v sqrt(1 - v^2)): 0.25 -> 0.685, 0.5 -> 0.391 (3 decimals:
// half a unit in the last place).
func TestMTFCircularValues(t *testing.T) {
	const tol3 = 5e-4
	for _, c := range []struct{ v, m float64 }{{0.25, 0.685}, {0.5, 0.391}, {0, 1}, {1, 0}} {
		if got := MTFCircular(c.v, 0); math.Abs(got-c.m) > tol3 {
			t.Errorf("v %g: %.4f, want %.3f", c.v, got, c.m)
		}
	}
	// Cut-off fc = 1 / (lambda N) in cycles per unit length; per pixel it is
	// pitch / (lambda N): 6.5 um pitch, 0.65 um, f/10 -> 1 cycle/pixel.
	const exact = 1e-12
	if fc := Cutoff(0.65, 10, 6.5); math.Abs(fc-1) > exact {
		t.Errorf("cut-off %g, want 1", fc)
	}
}

// Source: the OTF of an incoherent system is the normalised autocorrelation
// of its pupil (Goodman, Introduction to Fourier Optics, sec. 6.3). The
// annular formula is checked against a direct count of the overlap of two
// annuli (outer radius 1, inner radius eps) shifted by 2v, on a 1201 x 1201
// grid over [-1, 1]^2: the count's error is about the perimeter-to-area
// ratio times the cell size (~ 4 / 600 relative, derived), hence tolCount.
func TestMTFCircularObstructedMatchesPupilOverlap(t *testing.T) {
	const n = 1201
	const tolCount = 6e-3
	for _, eps := range []float64{0, 0.3, 0.5} {
		in := func(x, y float64) bool { r := x*x + y*y; return r <= 1 && r >= eps*eps }
		var area float64
		cells := make([][2]float64, 0, n*n)
		for j := 0; j < n; j++ {
			for i := 0; i < n; i++ {
				x, y := -1+2*float64(i)/float64(n-1), -1+2*float64(j)/float64(n-1)
				if in(x, y) {
					area++
					cells = append(cells, [2]float64{x, y})
				}
			}
		}
		for _, v := range []float64{0.1, 0.2, 0.35, 0.5, 0.7, 0.9} {
			var ov float64
			for _, c := range cells {
				if in(c[0]+2*v, c[1]) {
					ov++
				}
			}
			want := ov / area
			if got := MTFCircular(v, eps); math.Abs(got-want) > tolCount {
				t.Errorf("eps %g v %g: formula %.4f, pupil overlap %.4f", eps, v, got, want)
			}
		}
	}
}

// Source: Boreman (SPIE 2001, ch. 1: the system MTF is the product of the
// parts'); the convolution theorem (Gaussian variances add, derived); and the Poisson summation formula
// (the DTFT of a PSF point-sampled at pixel centres is sum_m T(f + m) over
// all integer m), which is what KernelFromTransfer's kernels are (see its
// doc). Tolerances: the 99.9 % support rule drops at most 1e-3 of the weight,
// which moves DFT values by at most about that much (derived); the variance
// of two point-sampled sigma-1 Gaussians convolved is 2 up to the truncation
// (TestGaussianVariance's reasoning).
func TestProductCascade(t *testing.T) {
	k, err := Parse("gaussian:sigma=1*gaussian:sigma=1", Env{})
	if err != nil {
		t.Fatal(err)
	}
	const tolVar = 4e-3
	vx, vy := k.Variance()
	if math.Abs(vx-2) > 2*tolVar || math.Abs(vy-2) > 2*tolVar {
		t.Errorf("variances %g %g, want 2", vx, vy)
	}
	const fc = 10 / (0.65 * 8) // Cutoff(0.65, 8, 10)
	spec := "gaussian:sigma=0.6*motion:length=1.5,angle=90*diffraction:wavelength=0.65,fnumber=8,pitch=10"
	parts := func(fx, fy float64) float64 {
		r := math.Hypot(fx, fy)
		return MTFGaussian(r, 0.6) * MTFMotion(fx, fy, 1.5, 90) * MTFCircular(r/fc, 0)
	}
	sys, err := ParseTransfer(spec)
	if err != nil {
		t.Fatal(err)
	}
	k, info, err := sys.Kernel()
	if err != nil {
		t.Fatal(err)
	}
	if info.Held < EnergyFraction-1e-12 {
		t.Errorf("support holds %g", info.Held)
	}
	const tolDFT = 2e-3
	for _, f := range [][2]float64{{0.5, 0}, {0, 0.5}, {0.25, 0.25}, {0.1, 0.4}, {0.05, 0}} {
		var want float64
		for my := -5; my <= 5; my++ {
			for mx := -5; mx <= 5; mx++ {
				want += parts(f[0]+float64(mx), f[1]+float64(my))
			}
		}
		if got := KernelTransfer(k, f[0], f[1]); math.Abs(got-want) > tolDFT {
			t.Errorf("%s at %v: kernel %g, aliased product of parts %g", spec, f, got, want)
		}
		const exact = 1e-12 // the same products, float rounding only
		if got := sys.At(f[0], f[1]); math.Abs(got-parts(f[0], f[1])) > exact {
			t.Errorf("System.At %v: %g want %g", f, got, parts(f[0], f[1]))
		}
	}
	// A full fill factor is the identity (the pixel aperture is not in
	// kernels: limpid's PSF convention).
	k, err = Parse("detector:fill=1", Env{})
	if err != nil || k.W != 1 || k.Data[0] != 1 {
		t.Errorf("detector:fill=1 is not the identity: %v %v", k, err)
	}
}

// gaussian-mtf: sigma from the system MTF at Nyquist. Source: the Gaussian
// MTF exp(-2 pi^2 sigma^2 f^2) (sigma 0.5 -> MTF_N 0.2912), the pixel
// aperture's 2/pi at Nyquist (Boreman, SPIE 2001) and e-SFR = Gaussian x
// |sinc| (convolution theorem, derived). 0.2912 has 4 decimals: d sigma / d MTF at 0.2912 is
// about -1.4, so half a unit in the last place is 7e-5 in sigma.
func TestGaussianFromNyquist(t *testing.T) {
	const tolSigma = 1e-4
	sx, sy, err := gaussianMTFSigmas(map[string]float64{"mtf": 0.2912, "aperture": 0})
	if err != nil || math.Abs(sx-0.5) > tolSigma || sx != sy {
		t.Errorf("aperture=0: %g %g %v", sx, sy, err)
	}
	sx, sy, err = gaussianMTFSigmas(map[string]float64{"across": 0.2912 * 2 / math.Pi, "along": MTFGaussian(0.5, 0.7) * 2 / math.Pi})
	if err != nil || math.Abs(sx-0.5) > tolSigma || math.Abs(sy-0.7) > tolSigma {
		t.Errorf("across/along: %g %g %v", sx, sy, err)
	}
	k, err := Parse("gaussian-mtf:across=0.2,along=0.1", Env{})
	if err != nil || !k.Separable() || k.H <= k.W {
		t.Errorf("gaussian-mtf kernel %dx%d %v", k.W, k.H, err)
	}
}

// Source: the spec grammar and parameter ranges documented in spec.go and
// the README (malformed specs are refused with a message naming the part
// that is wrong).
func TestParseNewSpecsRefuses(t *testing.T) {
	for _, c := range []struct{ spec, want string }{
		{"gaussian-mtf:mtf=0.7", "must be in (0, 0.6366)"},
		{"gaussian-mtf:mtf=0.2,along=0.1", "not both"},
		{"gaussian-mtf:across=0.2", "needs"},
		{"gaussian-mtf:mtf=0.2,aperture=2", "aperture"},
		{"diffraction:wavelength=0.65,fnumber=8", "needs pitch"},
		{"diffraction:wavelength=0.65,fnumber=8,pitch=5,obstruction=0.95", "obstruction"},
		{"diffraction:wavelength=-1,fnumber=8,pitch=5", "wavelength"},
		{"detector:fill=0.1", "fill"},
		{"detector:fill=0.5", "negative weights"},
		{"motion:length=-2", "length"},
		{"gaussian:sigma=1*", "expected NAME:PARAMETERS"},
		{"gaussian:sigma=1*kernel:x.txt", "cannot be combined"},
		{"gaussian:sigma=1*blob:r=2", "unknown model"},
		{"gaussian:sigma=1*motion:speed=2", "no parameter"},
	} {
		_, err := Parse(c.spec, Env{})
		if err == nil || !strings.Contains(err.Error(), c.want) {
			t.Errorf("%q: error %v, want %q", c.spec, err, c.want)
		}
	}
}
