package psf

import (
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"strings"

	"gonum.org/v1/gonum/dsp/fourier"
)

// Transfer is a real, even transfer function of frequency (fx, fy) in cycles
// per pixel along the column (x) and row (y) axes.
type Transfer func(fx, fy float64) float64

// EnergyFraction is the support rule of kernels built from transfer
// functions: the smallest square radius r whose (2r+1)^2 window holds at
// least this fraction of the kernel's absolute weight.
const EnergyFraction = 0.999

// TransferInfo describes how KernelFromTransfer built a kernel.
type TransferInfo struct {
	Grid    int     // DFT grid size N (frequencies k/N)
	Radius  int     // support radius (pixels) from the EnergyFraction rule
	Held    float64 // fraction of the absolute weight inside the support
	Clipped float64 // negative weight set to zero, as a fraction of the absolute weight inside the support
}

// maxTransferGrid bounds the DFT grid (4 M complex values, 64 MiB).
const maxTransferGrid = 1024

// MaxClipped is the largest share of negative weight (of the absolute
// weight in the support) KernelFromTransfer sets to zero; more is an error,
// because the clipped kernel would no longer have the requested transfer.
const MaxClipped = 0.01

// foldFactor Q: the continuous PSF is rendered band-limited to Q/2 cycles
// per pixel (spacing 1/Q pixel) before it is sampled at pixel centres.
const foldFactor = 4

// KernelFromTransfer builds the kernel of a system: psf is the product of the
// parts that have a point spread of their own (optics, motion, Gaussian);
// inBand (may be nil) multiplies inside the pixel grid's band only (the
// detector's fill-factor part, which is relative to the full pixel and so
// has no point spread of its own).
//
// The kernel is the inverse DFT, on an N x N grid of frequencies k/N in
// [-1/2, 1/2) cycles per pixel, of inBand times psf folded (aliased) onto
// that band from [-Q/2, Q/2) with Q = 4: the folded psf is exactly the
// transfer of the continuous PSF point-sampled at pixel centres. It is
// cropped to the EnergyFraction support, negative ringing (at most MaxClipped
// of the weight) is set to zero and it is normalised to sum 1. N starts at
// 64 and doubles (to at most 1024) until the support radius is at most N/4
// (the signed sums are then checked over at least [r, 2r)).
func KernelFromTransfer(psf, inBand Transfer) (*Kernel, TransferInfo, error) {
	for n := 64; ; n *= 2 {
		h := foldedInverseDFT(psf, inBand, n)
		r, held := energyRadius(h, n)
		if r > n/4 && n < maxTransferGrid {
			continue
		}
		if r > n/4 || 2*r+1 > MaxKernelSize {
			return nil, TransferInfo{}, fmt.Errorf("%w: the kernel needs a support radius above %d pixels to hold %.1f %% of its weight", ErrKernel, n/4, 100*EnergyFraction)
		}
		w := 2*r + 1
		data := make([]float64, w*w)
		var abs, neg float64
		for j := -r; j <= r; j++ {
			for i := -r; i <= r; i++ {
				v := h[((j+n)%n)*n+(i+n)%n]
				abs += math.Abs(v)
				if v < 0 {
					neg -= v
					v = 0
				}
				data[(j+r)*w+i+r] = v
			}
		}
		if neg > MaxClipped*abs {
			return nil, TransferInfo{}, fmt.Errorf("%w: the kernel has negative weights (%.1f %% of its weight, at most %.0f %% can be dropped); the product is not a non-negative PSF on the pixel grid (a fill factor below 1 sharpens, an oblique smear alone rings): add the optics' blur", ErrKernel, 100*neg/abs, 100*MaxClipped)
		}
		// Exact symmetry (the transfer functions are even): average the
		// point pairs so rounding noise does not break Kernel.Symmetric.
		for i := 0; i < len(data)/2; i++ {
			m := 0.5 * (data[i] + data[len(data)-1-i])
			data[i], data[len(data)-1-i] = m, m
		}
		k, err := NewKernel(w, w, data)
		if err != nil {
			return nil, TransferInfo{}, err
		}
		return k, TransferInfo{Grid: n, Radius: r, Held: held, Clipped: neg / abs}, nil
	}
}

// foldedInverseDFT returns the real part of the 2-D inverse DFT of
// inBand(f) * sum_m psf(f + m), row-major with offsets modulo n.
func foldedInverseDFT(psf, inBand Transfer, n int) []float64 {
	c := make([]complex128, n*n)
	freq := func(k int) float64 {
		if k >= n/2 {
			k -= n
		}
		return float64(k) / float64(n)
	}
	for l := 0; l < n; l++ {
		fy := freq(l)
		for k := 0; k < n; k++ {
			fx := freq(k)
			var v float64
			for my := -(foldFactor / 2); my <= (foldFactor-1)/2; my++ {
				for mx := -(foldFactor / 2); mx <= (foldFactor-1)/2; mx++ {
					v += psf(fx+float64(mx), fy+float64(my))
				}
			}
			if inBand != nil {
				v *= inBand(fx, fy)
			}
			c[l*n+k] = complex(v, 0)
		}
	}
	fft := fourier.NewCmplxFFT(n)
	row := make([]complex128, n)
	for l := 0; l < n; l++ {
		fft.Sequence(c[l*n:(l+1)*n], c[l*n:(l+1)*n])
	}
	for k := 0; k < n; k++ {
		for l := 0; l < n; l++ {
			row[l] = c[l*n+k]
		}
		fft.Sequence(row, row)
		for l := 0; l < n; l++ {
			c[l*n+k] = row[l]
		}
	}
	h := make([]float64, n*n)
	s := 1 / float64(n*n)
	for i, v := range c {
		h[i] = real(v) * s
	}
	return h
}

// energyRadius applies the EnergyFraction rule to a periodic kernel grid:
// the smallest r such that the weights inside every square of radius r' in
// [r, n/2) sum to within 1 - EnergyFraction of the total (the transfer
// function at zero). Band-limited kernels ring with alternating signs, so the
// signed sum is the energy measure that converges.
func energyRadius(h []float64, n int) (int, float64) {
	var total float64
	for _, v := range h {
		total += v
	}
	sums := make([]float64, n/2)
	var acc float64
	for r := 0; r < n/2; r++ {
		for j := -r; j <= r; j++ {
			for i := -r; i <= r; i++ {
				if max(abs(i), abs(j)) != r {
					continue
				}
				acc += h[((j+n)%n)*n+(i+n)%n]
			}
		}
		sums[r] = acc / total
	}
	r := n/2 - 1
	for r > 0 && math.Abs(sums[r-1]-1) <= 1-EnergyFraction {
		r--
	}
	return r, sums[r]
}

func abs(i int) int {
	if i < 0 {
		return -i
	}
	return i
}

func gaussianTransfer(sx, sy, angleDeg float64) Transfer {
	th := angleDeg * math.Pi / 180
	c, s := math.Cos(th), math.Sin(th)
	k := -2 * math.Pi * math.Pi
	return func(fx, fy float64) float64 {
		u := c*fx + s*fy
		v := -s*fx + c*fy
		return math.Exp(k * (sx*sx*u*u + sy*sy*v*v))
	}
}

// gaussianOTF is the transfer function of the gaussian model's parameters.
func gaussianOTF(p map[string]float64) (Transfer, error) {
	if s, ok := p["sigma"]; ok {
		if err := checkWidth("sigma", s); err != nil {
			return nil, err
		}
		p = map[string]float64{"sx": s, "sy": s}
	}
	if _, err := GaussianAniso(p["sx"], p["sy"], p["angle"]); err != nil {
		return nil, err
	}
	return gaussianTransfer(p["sx"], p["sy"], p["angle"]), nil
}

// nyquistAperture is the square pixel's MTF at Nyquist, 2/pi.
var nyquistAperture = Sinc(0.5)

// sigmaAtNyquist converts an MTF at Nyquist to a Gaussian sigma; with
// aperture it first divides out the pixel aperture's 2/pi.
func sigmaAtNyquist(key string, m float64, aperture bool) (float64, error) {
	g := m
	if aperture {
		g = m / nyquistAperture
	}
	if !(m > 0) || !(g < 1) {
		lim := 1.0
		if aperture {
			lim = nyquistAperture
		}
		return 0, fmt.Errorf("%w: %s=%g must be in (0, %.4f) (system MTF at Nyquist%s)", ErrKernel, key, m, lim, map[bool]string{true: ", pixel aperture included", false: ""}[aperture])
	}
	s := SigmaFromMTF(g, 0.5)
	if s < 0.05 {
		return 0, fmt.Errorf("%w: %s=%g gives sigma %.3g pixels, too small to model (at least 0.05)", ErrKernel, key, m, s)
	}
	return s, nil
}

func gaussianMTFSigmas(p map[string]float64) (sx, sy float64, err error) {
	ap := true
	if v, ok := p["aperture"]; ok {
		switch v {
		case 0:
			ap = false
		case 1:
		default:
			return 0, 0, fmt.Errorf("%w: aperture=%g must be 1 (value includes the pixel aperture) or 0", ErrKernel, v)
		}
	}
	if m, ok := p["mtf"]; ok {
		s, err := sigmaAtNyquist("mtf", m, ap)
		return s, s, err
	}
	if sx, err = sigmaAtNyquist("across", p["across"], ap); err != nil {
		return 0, 0, err
	}
	sy, err = sigmaAtNyquist("along", p["along"], ap)
	return sx, sy, err
}

func positive(name string, v, hi float64, unit string) error {
	if !(v > 0) || v > hi {
		return fmt.Errorf("%w: %s=%g must be in (0, %g] %s", ErrKernel, name, v, hi, unit)
	}
	return nil
}

func diffractionOTF(p map[string]float64) (Transfer, error) {
	lam, fn, pitch, eps := p["wavelength"], p["fnumber"], p["pitch"], p["obstruction"]
	if err := positive("wavelength", lam, 20, "micrometres"); err != nil {
		return nil, err
	}
	if err := positive("fnumber", fn, 1000, ""); err != nil {
		return nil, err
	}
	if err := positive("pitch", pitch, 1000, "micrometres"); err != nil {
		return nil, err
	}
	if eps < 0 || eps > 0.9 {
		return nil, fmt.Errorf("%w: obstruction=%g must be in [0, 0.9] (diameter ratio)", ErrKernel, eps)
	}
	fc := Cutoff(lam, fn, pitch)
	if fc < 0.02 {
		return nil, fmt.Errorf("%w: cut-off %.3g cycles/pixel (pitch / (wavelength fnumber)) is too low: the PSF would span more than 50 pixels", ErrKernel, fc)
	}
	return func(fx, fy float64) float64 {
		return MTFCircular(math.Hypot(fx, fy)/fc, eps)
	}, nil
}

func detectorOTF(p map[string]float64) (Transfer, error) {
	ff := p["fill"]
	if !(ff >= 0.25 && ff <= 1) {
		return nil, fmt.Errorf("%w: fill=%g must be in [0.25, 1] (active area / pixel area)", ErrKernel, ff)
	}
	a := math.Sqrt(ff)
	return func(fx, fy float64) float64 {
		return MTFDetector(fx, fy, a) / MTFDetector(fx, fy, 1)
	}, nil
}

func motionOTF(p map[string]float64) (Transfer, error) {
	l, ang := p["length"], p["angle"]
	if !(l >= 0) || l > 100 {
		return nil, fmt.Errorf("%w: length=%g must be in [0, 100] pixels", ErrKernel, l)
	}
	return func(fx, fy float64) float64 { return MTFMotion(fx, fy, l, ang) }, nil
}

func fromTransfer(otf func(map[string]float64) (Transfer, error), inBand bool) func(map[string]float64) (*Kernel, error) {
	return func(p map[string]float64) (*Kernel, error) {
		t, err := otf(p)
		if err != nil {
			return nil, err
		}
		sys := System{PSF: t}
		if inBand {
			sys = System{InBand: t}
		}
		k, _, err := sys.Kernel()
		return k, err
	}
}

func need(keys ...string) func(map[string]float64) error {
	return func(p map[string]float64) error {
		var miss []string
		for _, k := range keys {
			if _, ok := p[k]; !ok {
				miss = append(miss, k)
			}
		}
		if len(miss) > 0 {
			return fmt.Errorf("needs %s", strings.Join(miss, ", "))
		}
		return nil
	}
}

func init() {
	register(&Model{
		Name:    "gaussian-mtf",
		Summary: "Gaussian PSF (point-sampled) from the system MTF at Nyquist: one value (mtf) or across track (x, columns) and along track (y, rows); sigma = sqrt(-2 ln(MTF / 0.6366)) / pi",
		Params: []Param{
			{"mtf", "ratio", "MTF at Nyquist (0.5 cycles/pixel), both axes"},
			{"across", "ratio", "MTF at Nyquist across track (x, columns)"},
			{"along", "ratio", "MTF at Nyquist along track (y, rows)"},
			{"aperture", "0|1", "1 (default): the value includes the pixel aperture (2/pi at Nyquist, divided out); 0: it is the blur's own MTF, sigma = sqrt(-2 ln MTF) / pi"},
		},
		check: func(p map[string]float64) error {
			_, one := p["mtf"]
			_, ha := p["across"]
			_, hl := p["along"]
			switch {
			case one && (ha || hl):
				return errors.New("give either mtf or across,along, not both")
			case one, ha && hl:
				return nil
			}
			return errors.New("needs mtf=M or across=MX,along=MY")
		},
		build: func(p map[string]float64) (*Kernel, error) {
			sx, sy, err := gaussianMTFSigmas(p)
			if err != nil {
				return nil, err
			}
			return GaussianAniso(sx, sy, 0)
		},
		otf: func(p map[string]float64) (Transfer, error) {
			sx, sy, err := gaussianMTFSigmas(p)
			if err != nil {
				return nil, err
			}
			return gaussianTransfer(sx, sy, 0), nil
		},
	})
	register(&Model{
		Name:    "diffraction",
		Summary: "diffraction-limited circular aperture, optional central obstruction: MTF (2/pi)(acos v - v sqrt(1-v^2)), v = f / fc, fc = pitch / (wavelength fnumber) cycles/pixel",
		Params: []Param{
			{"wavelength", "micrometres", "centre wavelength of the band"},
			{"fnumber", "ratio", "focal length / aperture diameter"},
			{"pitch", "micrometres", "detector pixel pitch"},
			{"obstruction", "ratio", "central obstruction diameter / aperture diameter, 0 to 0.9 (default 0)"},
		},
		check: need("wavelength", "fnumber", "pitch"),
		build: fromTransfer(diffractionOTF, false),
		otf:   diffractionOTF,
	})
	register(&Model{
		Name:    "detector",
		Summary: "square detector footprint with a fill factor, relative to the full pixel (the pixel aperture itself is not in the kernel): sinc(a f) / sinc(f) per axis, a = sqrt(fill)",
		Params:  []Param{{"fill", "ratio", "active area / pixel area, 0.25 to 1 (1 = the identity)"}},
		check:   need("fill"),
		build:   fromTransfer(detectorOTF, true),
		otf:     detectorOTF,
		inBand:  true,
	})
	register(&Model{
		Name:    "motion",
		Summary: "uniform linear smear during the integration time: MTF |sinc(length f)| along its direction",
		Params: []Param{
			{"length", "pixels", "smear length, 0 to 100"},
			{"angle", "degrees", "direction from the column axis towards the row axis (default 0; 90 = along the rows' direction of flight)"},
		},
		check: need("length"),
		build: fromTransfer(motionOTF, false),
		otf:   motionOTF,
	})
}

// ProductSeparator joins parts of a product spec: the system transfer
// function is the product of the parts' (the kernel their convolution), e.g.
// "diffraction:wavelength=0.66,fnumber=8,pitch=6.5*motion:length=0.8,angle=90".
const ProductSeparator = "*"

// System is a product of transfer functions split as KernelFromTransfer
// needs it; a nil part is the identity.
type System struct {
	PSF, InBand Transfer
}

// At is the system transfer function (inside the band |fx|, |fy| <= 1/2).
func (s System) At(fx, fy float64) float64 {
	v := 1.0
	if s.PSF != nil {
		v = s.PSF(fx, fy)
	}
	if s.InBand != nil {
		v *= s.InBand(fx, fy)
	}
	return v
}

// Kernel builds the system's kernel (KernelFromTransfer).
func (s System) Kernel() (*Kernel, TransferInfo, error) {
	p := s.PSF
	if p == nil {
		p = func(float64, float64) float64 { return 1 }
	}
	return KernelFromTransfer(p, s.InBand)
}

// ParseTransfer returns the system a model spec or a product of model specs
// names (every registered model except kernel: and measured:).
func ParseTransfer(spec string) (System, error) {
	spec = strings.TrimSpace(spec)
	parts := strings.Split(spec, ProductSeparator)
	var psfs, bands []Transfer
	for _, part := range parts {
		m, p, err := parseModel(strings.TrimSpace(part))
		if err != nil {
			if len(parts) > 1 {
				return System{}, fmt.Errorf("product %q: %w", spec, err)
			}
			return System{}, err
		}
		if m.otf == nil {
			return System{}, fmt.Errorf("%w: %q: %s has no transfer function and cannot be part of a product (parts: %s)", ErrSpec, part, m.Name, transferNames())
		}
		t, err := m.otf(p)
		if err != nil {
			return System{}, fmt.Errorf("%q: %w", part, err)
		}
		if m.inBand {
			bands = append(bands, t)
		} else {
			psfs = append(psfs, t)
		}
	}
	return System{PSF: product(psfs), InBand: product(bands)}, nil
}

func product(ts []Transfer) Transfer {
	switch len(ts) {
	case 0:
		return nil
	case 1:
		return ts[0]
	}
	return func(fx, fy float64) float64 {
		v := 1.0
		for _, t := range ts {
			v *= t(fx, fy)
		}
		return v
	}
}

func transferNames() string {
	var n []string
	for _, m := range Models() {
		if m.otf != nil {
			n = append(n, m.Name)
		}
	}
	return strings.Join(n, ", ")
}

func parseProduct(spec string) (*Kernel, error) {
	sys, err := ParseTransfer(spec)
	if err != nil {
		return nil, err
	}
	k, _, err := sys.Kernel()
	if err != nil {
		return nil, fmt.Errorf("%q: %w", spec, err)
	}
	return k, nil
}

// Measured is the part of a `limpid psf measure` JSON summary the
// measured: spec reads: restoration sigmas in pixels (aperture removed).
// SigmaX or SigmaY may be missing (one edge orientation only); Sigma then
// stands for the missing axis.
type Measured struct {
	Sigma  *float64 `json:"sigma"`
	SigmaX *float64 `json:"sigma_x"`
	SigmaY *float64 `json:"sigma_y"`
}

// Spec is the gaussian spec equivalent to the summary.
func (m Measured) Spec() (string, error) {
	pick := func(v *float64) (float64, bool) {
		if v != nil && *v > 0 && !math.IsInf(*v, 0) {
			return *v, true
		}
		if m.Sigma != nil && *m.Sigma > 0 && !math.IsInf(*m.Sigma, 0) {
			return *m.Sigma, true
		}
		return 0, false
	}
	sx, okx := pick(m.SigmaX)
	sy, oky := pick(m.SigmaY)
	if !okx || !oky {
		return "", errors.New("has no positive sigma, sigma_x or sigma_y")
	}
	return fmt.Sprintf("gaussian:sx=%.6g,sy=%.6g", sx, sy), nil
}

// ParseMeasured reads a `limpid psf measure` JSON summary (one JSON object,
// nothing but white space after it) and returns the gaussian spec it stands
// for (Measured.Spec).
func ParseMeasured(r io.Reader) (string, error) {
	var m Measured
	dec := json.NewDecoder(r)
	if err := dec.Decode(&m); err != nil {
		return "", fmt.Errorf("is not a limpid psf measure JSON summary: %v", err)
	}
	return measuredSpec(&m, dec)
}

// measuredSpec refuses data after the decoded summary (a second object, a
// truncated concatenation) and returns the summary's spec.
func measuredSpec(m *Measured, dec *json.Decoder) (string, error) {
	if _, err := dec.Token(); err != io.EOF {
		return "", errors.New("has data after its JSON object (one summary per file)")
	}
	return m.Spec()
}

// maxMeasuredBytes bounds the JSON summary read by measured: (security).
const maxMeasuredBytes = 64 << 20

func loadMeasured(path string, env Env) (*Kernel, error) {
	if path == "" {
		return nil, fmt.Errorf("%w: measured needs the JSON summary of limpid psf measure, e.g. measured:psf.json", ErrSpec)
	}
	f, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("%w: measured file %s: %v", ErrSpec, path, errors.Unwrap(err))
	}
	defer f.Close()
	spec, err := ParseMeasured(io.LimitReader(f, maxMeasuredBytes))
	if err != nil {
		return nil, fmt.Errorf("%w: measured file %s %v", ErrSpec, path, err)
	}
	k, err := Parse(spec, env)
	if err != nil {
		return nil, fmt.Errorf("measured file %s: %w", path, err)
	}
	return k, nil
}

func init() {
	register(&Model{
		Name:    "measured",
		Summary: "the Gaussian a limpid psf measure JSON summary reports (sigma_x, sigma_y, else sigma; restoration sigmas, pixel aperture removed)",
		Params:  []Param{{"FILE", "file", "measured:FILE; everything after the colon is the path of the --json summary"}},
	})
}
