package psf

import (
	"errors"
	"fmt"
	"math"
)

// ErrMeasure is wrapped by every measurement error caused by the input
// window (no edge, flat window, unusable angle, too small).
var ErrMeasure = errors.New("psf: cannot measure")

// Safe range of the slanted-edge method. ISO 12233:2017 (e-SFR) asks for an
// edge slightly slanted from the pixel axis, a few degrees; 2-10 degrees is
// common practice (no source). Slopes 1/2, 1/3 and 1 are avoided (derived:
// at slope 1/k the edge's sub-pixel phase repeats every k lines, so only k
// phases fall into the BinsPerPixel bins of a pixel and bins stay empty or
// fill unevenly; see angleWarnings).
const (
	EdgeSafeMinDeg = 2.0
	EdgeSafeMaxDeg = 10.0
	// EdgeMinDeg and EdgeMaxDeg bound what MeasureEdge accepts at all:
	// below 1 degree a window of common height holds too few phase cycles
	// (the 1/4-pixel bins stay empty); beyond 30 degrees the edge is closer
	// to the other axis than the method's geometry assumes (common
	// practice, no source).
	EdgeMinDeg = 1.0
	EdgeMaxDeg = 30.0
	// MaxEdgeWindow bounds an edge window's side (the e-SFR's DFT costs
	// the square of the width).
	MaxEdgeWindow = 2048
	// BinsPerPixel is ISO 12233's 4x oversampling of the ESF.
	BinsPerPixel = 4
	// HammingFWHM and HammingMinPixels size the LSF window (see edgeSFR).
	HammingFWHM      = 3.0
	HammingMinPixels = 16.0
)

// EdgeResult is one slanted-edge measurement. Frequencies are in cycles per
// pixel along the edge normal (angle-corrected). MTF is the system e-SFR as
// ISO 12233 defines it (the pixel aperture included); Sigma is the
// restoration sigma (aperture removed).
type EdgeResult struct {
	// Vertical is true when the edge runs near the column direction (it
	// measures the blur along x); false for a near-horizontal edge (y).
	Vertical bool `json:"vertical"`
	// AngleDeg is the edge's angle from its nearest pixel axis (signed).
	AngleDeg float64 `json:"edge_angle_deg"`
	// Rows is the number of window lines (rows for a near-vertical edge,
	// columns otherwise) used: a whole number of phase cycles.
	Rows int `json:"rows_used"`
	// Low and High are the mean levels on the two sides (DN); Noise the
	// pixel noise estimate (DN); SNR = |High - Low| / Noise.
	Low, High, Noise, SNR float64
	// ESF (bins of 1/BinsPerPixel pixel across the edge, in horizontal
	// units for a near-vertical edge), LSF (the ESF's derivative), and the
	// e-SFR MTF at Freq.
	ESF  []float64 `json:"esf"`
	LSF  []float64 `json:"lsf"`
	Freq []float64 `json:"frequency"`
	MTF  []float64 `json:"mtf"`
	// ESFStep is the ESF bin width along the edge normal, pixels.
	ESFStep float64 `json:"esf_step"`
	// MTFNyquist is the e-SFR at Nyquist (0.5 cycles/pixel) with the noise
	// floor removed (sfrPipeline.nyquist); MTFNyquistFloor is that floor,
	// the e-SFR the window's noise alone gives there, and MTFNyquistRaw the
	// e-SFR curve's own value (signal and noise).
	MTFNyquist      float64 `json:"mtf_nyquist"`
	MTFNyquistFloor float64 `json:"mtf_nyquist_floor"`
	MTFNyquistRaw   float64 `json:"mtf_nyquist_raw"`
	MTF50           float64 `json:"mtf50"`
	// FWHM of the LSF along the normal, pixels (pixel aperture included).
	FWHM float64 `json:"fwhm"`
	// Sigma is the restoration sigma from the fit of
	// exp(-2 pi^2 s^2 f^2) |sinc f| |sinc(f d)| to the e-SFR (d the ESF
	// bin width); FitRMS is the fit's root-mean-square residual over the
	// fitted frequencies (up to FitMax); SigmaLSF = sqrt(var_LSF - 1/12), the
	// moment estimate, for comparison.
	Sigma    float64  `json:"sigma"`
	FitRMS   float64  `json:"fit_rms"`
	FitMax   float64  `json:"fit_max_frequency"`
	SigmaLSF float64  `json:"sigma_lsf"`
	Warnings []string `json:"warnings,omitempty"`
}

// MeasureEdge runs the ISO 12233 slanted-edge e-SFR on a w x h window
// (row-major) holding one straight edge between two uniform regions:
// per-line derivative centroids (Hamming-windowed), a least-squares edge
// line, a whole number of phase cycles, projection into 1/4-pixel bins
// (ESF), the [-1/2, 0, 1/2] derivative (LSF), background slope removal (the
// mean of the LSF tails, so a tilted background does not bias the result),
// centring and a Hamming window, the DFT modulus normalised at zero, the
// derivative's correction sin(2 pi k/N)/(2 pi k/N), and the frequency axis
// scaled by 1/cos(angle). NaN pixels are refused.
func MeasureEdge(win []float32, w, h int) (*EdgeResult, error) {
	if w*h != len(win) || w < 8 || h < 8 {
		return nil, fmt.Errorf("%w: the window is %dx%d; it needs at least 8x8 pixels", ErrMeasure, w, h)
	}
	if w > MaxEdgeWindow || h > MaxEdgeWindow {
		return nil, fmt.Errorf("%w: the window is %dx%d; at most %d pixels on a side (an edge window spans a few tens of pixels across the edge)", ErrMeasure, w, h, MaxEdgeWindow)
	}
	for i, v := range win {
		if math.IsNaN(float64(v)) || math.IsInf(float64(v), 0) {
			return nil, fmt.Errorf("%w: the window has an invalid pixel at column %d, row %d (nodata?)", ErrMeasure, i%w, i/w)
		}
	}
	img := make([]float64, len(win))
	for i, v := range win {
		img[i] = float64(v)
	}
	// Orientation: a near-vertical edge changes along x.
	var gx, gy float64
	for y := 1; y < h-1; y++ {
		for x := 1; x < w-1; x++ {
			gx += math.Abs(img[y*w+x+1] - img[y*w+x-1])
			gy += math.Abs(img[(y+1)*w+x] - img[(y-1)*w+x])
		}
	}
	vertical := gx >= gy
	if !vertical {
		t := make([]float64, len(img))
		for y := 0; y < h; y++ {
			for x := 0; x < w; x++ {
				t[x*h+y] = img[y*w+x]
			}
		}
		img, w, h = t, h, w
	}
	r, err := edgeSFR(img, w, h)
	if err != nil {
		return nil, err
	}
	r.Vertical = vertical
	return r, nil
}

// edgeSFR is the e-SFR of a near-vertical edge in a w x h window (img is
// modified: its background tilt is removed). The stages follow ISO 12233:2017
// (e-SFR; Burns, "Slanted-edge MTF for digital camera and scanner analysis",
// Proc. IS&T PICS 2000, pp. 135-138, describes the same sfrmat steps):
//  1. sideLevels: the levels on both sides and the noise;
//  2. locateEdge: the edge position on every row and the least-squares line;
//  3. edgeAngle, angleWarnings: the angle and its safe range;
//  4. phaseCycleRows: the rows holding a whole number of phase cycles;
//  5. binESF: the supersampled ESF in 1/BinsPerPixel-pixel bins;
//  6. edgeLSF: its derivative, the LSF;
//  7. lsfCentre, lsfMomentSigma: the LSF's centroid and moment sigma;
//  8. sfrPipeline.esfr: the Hamming window, the DFT with the derivative
//     correction, and the frequency axis scaled by 1/cos(angle);
//  9. fitSigma: the restoration sigma fitted to the e-SFR.
func edgeSFR(img []float64, w, h int) (*EdgeResult, error) {
	noise := pixelNoise(img, w, h)
	lo, hi := sideLevels(img, w, h)
	step := hi - lo
	if math.Abs(step) < 5*noise || step == 0 {
		return nil, fmt.Errorf("%w: no edge in the window: the two sides differ by %.3g DN against a pixel noise of %.3g DN (flat window?)", ErrMeasure, math.Abs(step), noise)
	}
	sign := 1.0
	if step < 0 {
		sign = -1
	}
	a, b, err := locateEdge(img, w, h, sign)
	if err != nil {
		return nil, err
	}
	ang, err := edgeAngle(b)
	if err != nil {
		return nil, err
	}
	res := &EdgeResult{AngleDeg: ang, Low: lo, High: hi, Noise: noise, SNR: math.Abs(step) / math.Max(noise, 1e-30)}
	res.Warnings = append(res.Warnings, angleWarnings(ang, b)...)
	y0, rows, err := phaseCycleRows(w, h, a, b, ang)
	if err != nil {
		return nil, err
	}
	res.Rows = rows
	esf, counts, err := binESF(img, w, a, b, y0, rows)
	if err != nil {
		return nil, err
	}
	lsf := edgeLSF(esf, sign)
	cosA := math.Cos(ang * math.Pi / 180)
	binW := 1.0 / BinsPerPixel // horizontal units
	res.ESF, res.LSF, res.ESFStep = esf, lsf, binW*cosA
	fw, c, err := lsfCentre(lsf)
	if err != nil {
		return nil, err
	}
	res.SigmaLSF = lsfMomentSigma(lsf, c, fw, res.ESFStep)
	// The Hamming window spans HammingFWHM times the FWHM, at least
	// HammingMinPixels pixels (or the whole LSF): ISO 12233 windows the
	// whole LSF, which at low SNR lets the flat tails' noise raise the
	// e-SFR floor; a window many FWHM wide removes that noise and changes a
	// Gaussian LSF's variance by under 1 % (derived from the window's
	// curvature, 0.46 (2 pi / L)^2 / 2).
	n := len(lsf)
	wl := math.Min(float64(n), math.Max(HammingMinPixels*BinsPerPixel, HammingFWHM*fw))
	sfr := sfrPipeline{n: n, c: c, wl: wl, binW: binW, cosA: cosA}
	res.Freq, res.MTF = sfr.esfr(lsf)
	res.MTF50 = crossing(res.Freq, res.MTF, 0.5)
	res.FWHM = fwhm(lsf) * res.ESFStep
	res.Sigma, res.FitRMS, res.FitMax = fitSigma(res.Freq, res.MTF, sfr)
	res.MTFNyquistRaw = interpAt(res.Freq, res.MTF, 0.5)
	res.MTFNyquist, res.MTFNyquistFloor = sfr.nyquist(lsf, binVariances(counts, noise), res.Freq, res.MTF, res.Sigma)
	res.Warnings = append(res.Warnings, contrastWarnings(lo, hi, res.SNR)...)
	return res, nil
}

// sideLevels are the mean levels of the outer fifth of columns on the left
// (lo) and right (hi) of the window.
func sideLevels(img []float64, w, h int) (lo, hi float64) {
	band := max(1, w/5)
	for y := 0; y < h; y++ {
		for x := 0; x < band; x++ {
			lo += img[y*w+x]
			hi += img[y*w+w-1-x]
		}
	}
	lo /= float64(band * h)
	hi /= float64(band * h)
	return lo, hi
}

// locateEdge finds the edge line x = a + b y: derivative centroids per row
// (rowCentroids) and their least-squares line, then the background tilt
// removed from img (removeTilt) and three passes of centroids windowed
// around the last line. The outer parts of the window (beyond margin of the
// edge) must be flat: they fix the background slope and bound the
// centroid search.
func locateEdge(img []float64, w, h int, sign float64) (a, b float64, err error) {
	a, b, _, err = fitEdgeLine(rowCentroids(img, w, h, sign, nil, 0))
	if err != nil {
		return 0, 0, err
	}
	margin := math.Max(3, float64(w)/6)
	removeTilt(img, w, h, a, b, margin)
	var rms float64
	for pass := 0; pass < 3; pass++ {
		aa, bb := a, b
		a, b, rms, err = fitEdgeLine(rowCentroids(img, w, h, sign, func(y int) float64 { return aa + bb*float64(y) }, margin))
		if err != nil {
			return 0, 0, err
		}
	}
	if rms > 1.5 {
		return 0, 0, fmt.Errorf("%w: no straight edge in the window: the transition points scatter by %.2g pixels around a line", ErrMeasure, rms)
	}
	return a, b, nil
}

// fitEdgeLine is the least-squares line x = a + b y through the rows'
// centroids cs (NaN: the row shows no transition); at least half the rows,
// and 4, must have one.
func fitEdgeLine(cs []float64) (a, b, rms float64, err error) {
	var ys, xs []float64
	for y, c := range cs {
		if !math.IsNaN(c) {
			ys = append(ys, float64(y))
			xs = append(xs, c)
		}
	}
	if h := len(cs); len(xs) < h/2 || len(xs) < 4 {
		return 0, 0, 0, fmt.Errorf("%w: no edge in the window: only %d of %d lines show a transition", ErrMeasure, len(xs), h)
	}
	a, b, rms = lineFit(ys, xs)
	if math.IsNaN(a) || math.IsNaN(b) {
		return 0, 0, 0, fmt.Errorf("%w: no edge in the window: the edge line cannot be fitted", ErrMeasure)
	}
	return a, b, rms, nil
}

// edgeAngle is the angle (degrees, signed) of an edge of slope b from the
// pixel axis; outside EdgeMinDeg..EdgeMaxDeg it is an error.
func edgeAngle(b float64) (float64, error) {
	ang := math.Atan(b) * 180 / math.Pi
	if math.Abs(ang) < EdgeMinDeg {
		return 0, fmt.Errorf("%w: the edge is %.2f degrees off the pixel axis; the slanted-edge method needs %g-%g degrees (at least %g)", ErrMeasure, ang, EdgeSafeMinDeg, EdgeSafeMaxDeg, EdgeMinDeg)
	}
	if math.Abs(ang) > EdgeMaxDeg {
		return 0, fmt.Errorf("%w: the edge is %.1f degrees off the pixel axis; the slanted-edge method needs %g-%g degrees (at most %g)", ErrMeasure, ang, EdgeSafeMinDeg, EdgeSafeMaxDeg, EdgeMaxDeg)
	}
	return ang, nil
}

// angleWarnings flags an angle outside the safe range and slopes close to
// 1/3 and 1/2, whose phases repeat (see EdgeSafeMinDeg).
func angleWarnings(ang, b float64) []string {
	var out []string
	if math.Abs(ang) < EdgeSafeMinDeg || math.Abs(ang) > EdgeSafeMaxDeg {
		out = append(out, fmt.Sprintf("edge angle %.1f degrees is outside the safe range %g-%g", ang, EdgeSafeMinDeg, EdgeSafeMaxDeg))
	}
	for _, q := range []float64{1.0 / 3, 1.0 / 2} {
		if math.Abs(math.Abs(b)-q) < 0.02 {
			out = append(out, fmt.Sprintf("edge slope %.3f is close to 1/%d: phases repeat, bins fill unevenly", math.Abs(b), int(math.Round(1/q))))
		}
	}
	return out
}

// phaseCycleRows picks the rows y0..y0+rows-1 (centred in the window) that
// hold a whole number of phase cycles: the edge x = a + b y moves one pixel
// every 1/|b| lines. The edge must stay inside the window there with room
// for the ESF tails.
func phaseCycleRows(w, h int, a, b, ang float64) (y0, rows int, err error) {
	cycles := math.Floor(float64(h) * math.Abs(b))
	if cycles < 1 {
		return 0, 0, fmt.Errorf("%w: the window is %d lines long; an edge at %.2f degrees needs at least %d lines for one phase cycle", ErrMeasure, h, ang, int(math.Ceil(1/math.Abs(b))))
	}
	rows = int(math.Floor(cycles / math.Abs(b)))
	rows = min(max(rows, 1), h)
	y0 = (h - rows) / 2
	for _, y := range []int{y0, y0 + rows - 1} {
		if x := a + b*float64(y); x < 3 || x > float64(w-4) {
			return 0, 0, fmt.Errorf("%w: the edge leaves the window (at line %d it crosses column %.1f of %d); centre the window on the edge", ErrMeasure, y, x, w)
		}
	}
	return y0, rows, nil
}

// binESF projects the pixels of rows y0..y0+rows-1 into bins of
// 1/BinsPerPixel pixel of horizontal distance to the edge line x = a + b y
// (the supersampled ESF, centred on the edge's mean position) and keeps the
// span of bins reached from both sides (an edge near a window side leaves
// outer bins empty); counts holds the number of pixels in each kept bin (0:
// an empty bin, interpolated).
func binESF(img []float64, w int, a, b float64, y0, rows int) (esf, counts []float64, err error) {
	nb := BinsPerPixel * w
	if nb%2 == 1 {
		nb++
	}
	sum := make([]float64, nb)
	cnt := make([]float64, nb)
	for y := y0; y < y0+rows; y++ {
		xe := a + b*float64(y)
		for x := 0; x < w; x++ {
			d := float64(x) - xe
			k := int(math.Floor(d*BinsPerPixel)) + nb/2
			if k < 0 || k >= nb {
				continue
			}
			sum[k] += img[y*w+x]
			cnt[k]++
		}
	}
	first, last := 0, nb-1
	for first < nb && cnt[first] == 0 {
		first++
	}
	for last >= 0 && cnt[last] == 0 {
		last--
	}
	esf = make([]float64, 0, last-first+1)
	for k := first; k <= last; k++ {
		if cnt[k] > 0 {
			esf = append(esf, sum[k]/cnt[k])
		} else {
			esf = append(esf, math.NaN())
		}
	}
	fillEmptyBins(esf)
	if n := len(esf); n < 4*BinsPerPixel {
		return nil, nil, fmt.Errorf("%w: too few ESF bins (%d)", ErrMeasure, n)
	}
	return esf, cnt[first : last+1], nil
}

// fillEmptyBins gives empty (NaN) bins, a few at unlucky slopes, the linear
// interpolation of their nearest filled neighbours (the nearest one at an
// end).
func fillEmptyBins(esf []float64) {
	for i, v := range esf {
		if math.IsNaN(v) {
			l, r := i-1, i+1
			for l >= 0 && math.IsNaN(esf[l]) {
				l--
			}
			for r < len(esf) && math.IsNaN(esf[r]) {
				r++
			}
			switch {
			case l >= 0 && r < len(esf):
				esf[i] = esf[l] + (esf[r]-esf[l])*float64(i-l)/float64(r-l)
			case l >= 0:
				esf[i] = esf[l]
			default:
				esf[i] = esf[r]
			}
		}
	}
}

// edgeLSF is the LSF: the ESF's [-1/2, 0, 1/2] derivative, oriented so the
// step is positive, less the background slope (the mean of the LSF's
// outer eighth on each side is the background gradient).
func edgeLSF(esf []float64, sign float64) []float64 {
	n := len(esf)
	lsf := make([]float64, n)
	for i := 1; i < n-1; i++ {
		lsf[i] = sign * 0.5 * (esf[i+1] - esf[i-1])
	}
	lsf[0], lsf[n-1] = lsf[1], lsf[n-2]
	tail := max(2, n/8)
	var off float64
	for i := 0; i < tail; i++ {
		off += lsf[i] + lsf[n-1-i]
	}
	off /= float64(2 * tail)
	for i := range lsf {
		lsf[i] -= off
	}
	return lsf
}

// lsfCentre is the LSF's FWHM (bins) and its centroid c (bin index) within
// 3 FWHM of the peak (the tails are noise). The DFT takes the centroid as
// origin (a shift only changes the phase).
func lsfCentre(lsf []float64) (fw, c float64, err error) {
	fw = fwhm(lsf)
	if math.IsNaN(fw) || fw <= 0 {
		return 0, 0, fmt.Errorf("%w: no edge in the window: the line spread function has no clear peak", ErrMeasure)
	}
	ip := 0
	for i, v := range lsf {
		if v > lsf[ip] {
			ip = i
		}
	}
	var s0, s1 float64
	for i, v := range lsf {
		if math.Abs(float64(i-ip)) <= 3*fw {
			s0 += v
			s1 += v * float64(i)
		}
	}
	if !(s0 > 0) {
		return 0, 0, fmt.Errorf("%w: no edge in the window: the line spread function has no positive area", ErrMeasure)
	}
	return fw, s1 / s0, nil
}

// lsfMomentSigma is sqrt(var_LSF - 1/12): the LSF's variance about c
// within 3 FWHM (fw bins), in pixels^2 along the normal (bins of step
// pixels), less the unit pixel box's 1/12 (derived: the LSF of a Gaussian
// system seen by a full pixel is the Gaussian convolved with the box, and
// variances add).
func lsfMomentSigma(lsf []float64, c, fw, step float64) float64 {
	var v0, v2 float64
	for i, v := range lsf {
		if d := float64(i) - c; math.Abs(d) <= 3*fw {
			v0 += v
			v2 += v * d * d
		}
	}
	vLSF := v2 / v0 * step * step
	return math.Sqrt(math.Max(vLSF-1.0/12, 0))
}

// contrastWarnings flags a step below 20 noise and a modulation above 0.9
// (clipping).
func contrastWarnings(lo, hi, snr float64) []string {
	var out []string
	if snr < 20 {
		out = append(out, fmt.Sprintf("edge contrast %.3g DN is only %.1f times the noise; at least 20 is advisable (common practice, no source)", math.Abs(hi-lo), snr))
	}
	if lo > 0 && hi > 0 {
		if mc := math.Abs(hi-lo) / (hi + lo); mc > 0.9 {
			out = append(out, fmt.Sprintf("edge modulation %.2f is very high: check the bright side for clipping (ISO 12233 recommends a reduced contrast)", mc))
		}
	}
	return out
}

// rowCentroids returns the derivative centroid of each row (x positions).
// Without a line (centre == nil) it uses the values above a fifth of the
// row's peak derivative; with one, the signed derivative within hw pixels of
// the line, Hamming-weighted (the window is symmetric about the edge, so
// noise does not pull the centroid; ISO 12233 windows the centroid search
// the same way).
func rowCentroids(img []float64, w, h int, sign float64, centre func(y int) float64, hw float64) []float64 {
	cs := make([]float64, h)
	d := make([]float64, w)
	for y := 0; y < h; y++ {
		row := img[y*w : (y+1)*w]
		for x := 1; x < w-1; x++ {
			d[x] = sign * 0.5 * (row[x+1] - row[x-1])
		}
		d[0], d[w-1] = 0, 0
		var s, sx float64
		if centre == nil {
			peak := 0.0
			for _, v := range d {
				peak = math.Max(peak, v)
			}
			for x, v := range d {
				if v > 0.2*peak {
					s += v
					sx += v * float64(x)
				}
			}
		} else {
			c := centre(y)
			for x := max(1, int(math.Ceil(c-hw))); x <= min(w-2, int(math.Floor(c+hw))); x++ {
				v := d[x] * hamming(float64(x), 2*hw, c)
				s += v
				sx += v * float64(x)
			}
		}
		if s > 0 {
			cs[y] = sx / s
		} else {
			cs[y] = math.NaN()
		}
	}
	return cs
}

// removeTilt fits level + step*side + gx*x + gy*y by least squares to the
// pixels farther than margin from the edge line x = a + b y and subtracts
// the background slope gx*x + gy*y, so a tilted background does not bias
// the ESF.
func removeTilt(img []float64, w, h int, a, b, margin float64) {
	m := augmented(4)
	for y := 0; y < h; y++ {
		xe := a + b*float64(y)
		for x := 0; x < w; x++ {
			d := float64(x) - xe
			if math.Abs(d) < margin {
				continue
			}
			side := 0.0
			if d > 0 {
				side = 1
			}
			row := [4]float64{1, side, float64(x) - float64(w)/2, float64(y) - float64(h)/2}
			v := img[y*w+x]
			for i := 0; i < 4; i++ {
				for j := 0; j < 4; j++ {
					m[i][j] += row[i] * row[j]
				}
				m[i][4] += row[i] * v
			}
		}
	}
	c, ok := solveLinear(m, 1e-12)
	if !ok {
		return
	}
	for y := 0; y < h; y++ {
		for x := 0; x < w; x++ {
			img[y*w+x] -= c[2]*(float64(x)-float64(w)/2) + c[3]*(float64(y)-float64(h)/2)
		}
	}
}
