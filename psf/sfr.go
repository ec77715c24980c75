package psf

import "math"

// The LSF-to-e-SFR stages of the slanted-edge method (ISO 12233:2017 e-SFR)
// and the Gaussian fit to the e-SFR.

// hamming is the Hamming window of length n centred at centre (Hamming,
// Digital Filters, 1977; ISO 12233 uses it for both the centroids and the
// LSF).
func hamming(i, n float64, centre float64) float64 {
	return 0.54 + 0.46*math.Cos(2*math.Pi*(i-centre)/n)
}

// interpAt is ys linearly interpolated at x (xs increasing; NaN beyond).
func interpAt(xs, ys []float64, x float64) float64 {
	for i := 1; i < len(xs); i++ {
		if xs[i] >= x {
			t := (x - xs[i-1]) / (xs[i] - xs[i-1])
			return ys[i-1] + t*(ys[i]-ys[i-1])
		}
	}
	return math.NaN()
}

// crossing is the first x where ys falls below level (linear interpolation).
func crossing(xs, ys []float64, level float64) float64 {
	for i := 1; i < len(xs); i++ {
		if ys[i] < level && ys[i-1] >= level {
			t := (ys[i-1] - level) / (ys[i-1] - ys[i])
			return xs[i-1] + t*(xs[i]-xs[i-1])
		}
	}
	return math.NaN()
}

// fwhm is the full width at half maximum of a peak, in samples.
func fwhm(v []float64) float64 {
	im := 0
	for i, x := range v {
		if x > v[im] {
			im = i
		}
	}
	half := v[im] / 2
	l := im
	for l > 0 && v[l] > half {
		l--
	}
	r := im
	for r < len(v)-1 && v[r] > half {
		r++
	}
	if v[l] > half || v[r] > half {
		return math.NaN()
	}
	xl := float64(l) + (half-v[l])/(v[l+1]-v[l])
	xr := float64(r) - (half-v[r])/(v[r-1]-v[r])
	return xr - xl
}

// sfrPipeline is the LSF-to-e-SFR part of the method: Hamming window of
// length wl bins centred at bin c, DFT modulus normalised at zero with the
// centroid as origin, derivative correction, angle-corrected frequencies.
type sfrPipeline struct {
	n          int
	c, wl      float64
	binW, cosA float64
}

// freq is the frequency of DFT index k in cycles per pixel along the edge
// normal: k / (n binW) along the row, scaled by 1/cos(angle) (ISO 12233:2017
// e-SFR frequency correction for the slanted edge).
func (p sfrPipeline) freq(k int) float64 { return float64(k) / (float64(p.n) * p.binW) / p.cosA }

// esfr is the e-SFR of lsf at every DFT index up to n/2 and its frequencies.
func (p sfrPipeline) esfr(lsf []float64) (freq, mtf []float64) {
	freq = make([]float64, p.n/2+1)
	mtf = make([]float64, p.n/2+1)
	for k := range freq {
		freq[k] = p.freq(k)
	}
	p.mtf(lsf, mtf, nil)
	return freq, mtf
}

// mtf writes the e-SFR of lsf at every k (ks nil) or at the listed ks: the
// modulus of the DFT of the Hamming-windowed LSF about its centroid,
// normalised by its value at zero, divided by the response of the
// [-1/2, 0, 1/2] derivative, sin(2 pi k/n) / (2 pi k/n) (ISO 12233:2017
// e-SFR; derived: at DFT index k the central difference
// (x[i+1] - x[i-1]) / 2 has the response i sin(2 pi k/n), the exact
// derivative per bin i 2 pi k/n).
func (p sfrPipeline) mtf(lsf, out []float64, ks []int) {
	var dc float64
	lo, hi := max(0, int(math.Ceil(p.c-p.wl/2))), min(p.n-1, int(math.Floor(p.c+p.wl/2)))
	win := make([]float64, p.n)
	for i := lo; i <= hi; i++ {
		if math.Abs(float64(i)-p.c) < p.wl/2 {
			win[i] = lsf[i] * hamming(float64(i), p.wl, p.c)
			dc += win[i]
		}
	}
	one := func(k int) float64 {
		var re, im float64
		for i := lo; i <= hi; i++ {
			ph := 2 * math.Pi * float64(k) * (float64(i) - p.c) / float64(p.n)
			re += win[i] * math.Cos(ph)
			im -= win[i] * math.Sin(ph)
		}
		m := math.Hypot(re, im) / dc
		if k > 0 {
			x := 2 * math.Pi * float64(k) / float64(p.n)
			m /= math.Sin(x) / x
		}
		return m
	}
	if ks == nil {
		for k := range out {
			out[k] = one(k)
		}
		return
	}
	for j, k := range ks {
		out[j] = one(k)
	}
}

// g1, g2: first and second antiderivatives of the standard normal CDF,
// x Phi(x) + phi(x) and ((x^2 + 1) Phi(x) + x phi(x)) / 2 (derived).
func g1(x float64) float64 { return x*normalCDF(x) + normalPDF(x) }
func g2(x float64) float64 { return ((x*x+1)*normalCDF(x) + x*normalPDF(x)) / 2 }

func normalCDF(x float64) float64 { return 0.5 * math.Erfc(-x/math.Sqrt2) }
func normalPDF(x float64) float64 { return math.Exp(-0.5*x*x) / math.Sqrt(2*math.Pi) }

// modelLSF is what the method's binning and derivative make of a Gaussian
// restoration PSF of sigma s seen by a full square pixel: the ESF
// Phi(./s) convolved with the unit pixel box, averaged over bins of width d
// (along the normal) centred at (i - c) d, then the [-1/2, 0, 1/2]
// derivative. Its e-SFR before windowing is exp(-2 pi^2 s^2 f^2) |sinc f|
// times the binning and derivative responses (derived: the Gaussian MTF
// exp(-2 pi^2 s^2 f^2) is the Fourier transform of the Gaussian PSF, the
// unit pixel box contributes sinc f, and binning and differencing are
// linear filters applied the same way to the measurement).
func modelLSF(out []float64, s, c, d float64) {
	// H is the antiderivative of ESF(t) = s (g1((t+1/2)/s) - g1((t-1/2)/s)).
	H := func(t float64) float64 { return s * s * (g2((t+0.5)/s) - g2((t-0.5)/s)) }
	n := len(out)
	esf := make([]float64, n)
	for i := range esf {
		t := (float64(i) - c) * d
		esf[i] = (H(t+d/2) - H(t-d/2)) / d
	}
	for i := 1; i < n-1; i++ {
		out[i] = 0.5 * (esf[i+1] - esf[i-1])
	}
	out[0], out[n-1] = out[1], out[n-2]
}

// fitSigma fits the e-SFR of modelLSF, run through the same pipeline (so
// the window, binning and derivative affect model and measurement alike), to
// the measured e-SFR by least squares over the frequencies up to Nyquist
// where the measurement is above 0.1 (below it noise dominates); golden
// section on s in [0.05, 20] pixels. This is the fit of
// exp(-2 pi^2 s^2 f^2) |sinc f| to the e-SFR.
func fitSigma(freq, mtf []float64, p sfrPipeline) (s, rmsRes, fmax float64) {
	var idx []int
	for k := 1; k < len(freq) && freq[k] <= 0.5+1e-9; k++ {
		if mtf[k] < 0.1 {
			break
		}
		idx = append(idx, k)
	}
	for k := len(idx) + 1; len(idx) < 3 && k < len(freq); k++ {
		idx = append(idx, k)
	}
	fmax = freq[idx[len(idx)-1]]
	lsf := make([]float64, p.n)
	m := make([]float64, len(idx))
	d := p.binW * p.cosA
	cost := func(s float64) float64 {
		modelLSF(lsf, s, p.c, d)
		p.mtf(lsf, m, idx)
		var c float64
		for j, k := range idx {
			e := mtf[k] - m[j]
			c += e * e
		}
		return c
	}
	s = golden(cost, 0.05, 20)
	return s, math.Sqrt(cost(s) / float64(len(idx))), fmax
}

// NyquistBand is the half-width (cycles/pixel) of the band around Nyquist
// whose DFT samples fix the noise-corrected e-SFR at Nyquist: wide enough to
// hold a few independent samples of a 16-pixel Hamming window (its DFT
// resolution is 1/16 cycles/pixel), narrow enough that the fitted model's
// shape carries the level to 0.5 (sfrPipeline.nyquist).
const NyquistBand = 0.1

// binVariances is the noise variance of each ESF bin: the pixel noise
// variance over the bin's pixel count (the variance of a mean of
// independent pixels); an empty, interpolated bin counts as one pixel.
func binVariances(counts []float64, noise float64) []float64 {
	v := make([]float64, len(counts))
	for i, c := range counts {
		v[i] = noise * noise / math.Max(c, 1)
	}
	return v
}

// floorPower is the expected squared e-SFR of the noise alone at DFT index
// k (normalised like mtf: by the windowed LSF's sum dc and the derivative's
// response). With ESF bin errors e_m independent of variance v_m, the LSF
// error at bin i is (e_{i+1} - e_{i-1}) / 2, so the windowed DFT's error is
// sum_m e_m c_m with c_m = (W_{m-1} z_{m-1} - W_{m+1} z_{m+1}) / 2 (W the
// Hamming weights, z_i = exp(-2 pi j k (i - c) / n)) and its expected power
// sum_m v_m |c_m|^2 (derived; the constant removed as background slope and
// the copied end bins are left out: they fall outside the window).
func (p sfrPipeline) floorPower(vars []float64, dc float64, k int) float64 {
	wz := func(i int) complex128 {
		if i < 0 || i >= p.n || math.Abs(float64(i)-p.c) >= p.wl/2 {
			return 0
		}
		ph := 2 * math.Pi * float64(k) * (float64(i) - p.c) / float64(p.n)
		return complex(hamming(float64(i), p.wl, p.c)*math.Cos(ph), -hamming(float64(i), p.wl, p.c)*math.Sin(ph))
	}
	var e float64
	for m, v := range vars {
		c := (wz(m-1) - wz(m+1)) / 2
		e += v * (real(c)*real(c) + imag(c)*imag(c))
	}
	g := dc
	if k > 0 {
		x := 2 * math.Pi * float64(k) / float64(p.n)
		g *= math.Sin(x) / x
	}
	return e / (g * g)
}

// nyquist is the e-SFR at Nyquist with the noise floor removed, and the
// floor. The squared e-SFR of signal plus independent noise is, in
// expectation, the signal's plus the floor's (floorPower), so the signal
// power at each DFT sample within NyquistBand of 0.5 is mtf^2 - floor^2.
// Those samples are few and noisy: their level is fitted by least squares
// to the shape of the fitted model's e-SFR squared (modelLSF at sigma run
// through the same pipeline), scaled to 1 at Nyquist; the corrected value
// is the square root of that level (0 when the floor swallows it). A noise
// floor subtraction of this kind is the usual correction of a power
// spectrum for additive noise (Source: Bendat & Piersol, Random Data, 4th
// ed., Wiley 2010, ch. 11, bias of auto-spectra with extraneous noise; from
// memory, the chapter number not checked).
func (p sfrPipeline) nyquist(lsf, vars, freq, mtf []float64, sigma float64) (corrected, floor float64) {
	var dc float64
	for i := range lsf {
		if math.Abs(float64(i)-p.c) < p.wl/2 {
			dc += lsf[i] * hamming(float64(i), p.wl, p.c)
		}
	}
	var ks []int
	for k := 1; k < len(freq); k++ {
		if math.Abs(freq[k]-0.5) <= NyquistBand {
			ks = append(ks, k)
		}
	}
	floors := make([]float64, len(freq))
	for k := 1; k < len(freq) && freq[k] <= 0.5+NyquistBand; k++ {
		floors[k] = math.Sqrt(p.floorPower(vars, dc, k))
	}
	floor = interpAt(freq, floors, 0.5)
	if len(ks) == 0 || dc <= 0 {
		return interpAt(freq, mtf, 0.5), floor
	}
	model := make([]float64, p.n)
	modelLSF(model, sigma, p.c, p.binW*p.cosA)
	mm := make([]float64, len(freq))
	p.mtf(model, mm, nil)
	mN := interpAt(freq, mm, 0.5)
	var num, den float64
	for _, k := range ks {
		g := mm[k] * mm[k] / (mN * mN)
		num += g * (mtf[k]*mtf[k] - floors[k]*floors[k])
		den += g * g
	}
	if den == 0 || num <= 0 {
		return 0, floor
	}
	return math.Sqrt(num / den), floor
}
