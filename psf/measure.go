package psf

import (
	"errors"
	"fmt"
	"math"
	"sort"
)

// ErrMeasure is wrapped by every measurement error caused by the input
// window (no edge, flat window, unusable angle, too small).
var ErrMeasure = errors.New("psf: cannot measure")

// Safe range of the slanted-edge method (ISO 12233 recommends a few degrees;
// GUIDE section 2: about 2-10 degrees, avoid slopes 1/2, 1/3 and 1).
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
	ESFStep    float64 `json:"esf_step"`
	MTFNyquist float64 `json:"mtf_nyquist"`
	MTF50      float64 `json:"mtf50"`
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

// pixelNoise is a robust noise estimate: MAD of the second differences
// along rows, / sqrt(6) (the variance of x[i-1] - 2x[i] + x[i+1] is 6 var
// for white noise, derived), times 1.4826 (GUIDE section 2, MAD sigma).
func pixelNoise(img []float64, w, h int) float64 {
	var d []float64
	for y := 0; y < h; y++ {
		for x := 1; x < w-1; x++ {
			d = append(d, img[y*w+x-1]-2*img[y*w+x]+img[y*w+x+1])
		}
	}
	m := median(d)
	for i := range d {
		d[i] = math.Abs(d[i] - m)
	}
	return 1.4826 * median(d) / math.Sqrt(6)
}

func median(v []float64) float64 {
	if len(v) == 0 {
		return math.NaN()
	}
	s := append([]float64(nil), v...)
	sort.Float64s(s)
	n := len(s)
	if n%2 == 1 {
		return s[n/2]
	}
	return 0.5 * (s[n/2-1] + s[n/2])
}

// lineFit is the least-squares line x = a + b y through (ys[i], xs[i]).
func lineFit(ys, xs []float64) (a, b, rms float64) {
	n := float64(len(xs))
	var sy, sx, syy, sxy float64
	for i := range xs {
		sy += ys[i]
		sx += xs[i]
		syy += ys[i] * ys[i]
		sxy += ys[i] * xs[i]
	}
	den := n*syy - sy*sy
	b = (n*sxy - sy*sx) / den
	a = (sx - b*sy) / n
	for i := range xs {
		e := xs[i] - a - b*ys[i]
		rms += e * e
	}
	return a, b, math.Sqrt(rms / n)
}

func hamming(i, n float64, centre float64) float64 {
	// Hamming window of length n centred at centre (ISO 12233 uses it for
	// both the centroids and the LSF).
	return 0.54 + 0.46*math.Cos(2*math.Pi*(i-centre)/n)
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
	var m [4][5]float64
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
	c, ok := solve4(m)
	if !ok {
		return
	}
	for y := 0; y < h; y++ {
		for x := 0; x < w; x++ {
			img[y*w+x] -= c[2]*(float64(x)-float64(w)/2) + c[3]*(float64(y)-float64(h)/2)
		}
	}
}

// solve4 solves a 4x4 augmented system (see gaussSolve).
func solve4(m [4][5]float64) ([4]float64, bool) {
	rows := make([][]float64, 4)
	for r := range rows {
		rows[r] = m[r][:]
	}
	var x [4]float64
	ok := gaussSolve(rows, x[:], 1e-12)
	return x, ok
}

// gaussSolve solves the n x (n+1) augmented system m (modified in place) by
// Gaussian elimination with partial pivoting into x; false when a pivot is
// below tiny in magnitude.
func gaussSolve(m [][]float64, x []float64, tiny float64) bool {
	n := len(m)
	for col := 0; col < n; col++ {
		p := col
		for r := col + 1; r < n; r++ {
			if math.Abs(m[r][col]) > math.Abs(m[p][col]) {
				p = r
			}
		}
		if math.Abs(m[p][col]) < tiny {
			return false
		}
		m[col], m[p] = m[p], m[col]
		for r := col + 1; r < n; r++ {
			f := m[r][col] / m[col][col]
			for k := col; k <= n; k++ {
				m[r][k] -= f * m[col][k]
			}
		}
	}
	for r := n - 1; r >= 0; r-- {
		s := m[r][n]
		for k := r + 1; k < n; k++ {
			s -= m[r][k] * x[k]
		}
		x[r] = s / m[r][r]
	}
	return true
}

func edgeSFR(img []float64, w, h int) (*EdgeResult, error) {
	noise := pixelNoise(img, w, h)
	// Side levels from the outer fifth of columns.
	band := max(1, w/5)
	var lo, hi float64
	for y := 0; y < h; y++ {
		for x := 0; x < band; x++ {
			lo += img[y*w+x]
			hi += img[y*w+w-1-x]
		}
	}
	lo /= float64(band * h)
	hi /= float64(band * h)
	step := hi - lo
	if math.Abs(step) < 5*noise || step == 0 {
		return nil, fmt.Errorf("%w: no edge in the window: the two sides differ by %.3g DN against a pixel noise of %.3g DN (flat window?)", ErrMeasure, math.Abs(step), noise)
	}
	sign := 1.0
	if step < 0 {
		sign = -1
	}
	var a, b, rms float64
	fit := func(cs []float64) error {
		var ys, xs []float64
		for y, c := range cs {
			if !math.IsNaN(c) {
				ys = append(ys, float64(y))
				xs = append(xs, c)
			}
		}
		if len(xs) < h/2 || len(xs) < 4 {
			return fmt.Errorf("%w: no edge in the window: only %d of %d lines show a transition", ErrMeasure, len(xs), h)
		}
		a, b, rms = lineFit(ys, xs)
		if math.IsNaN(a) || math.IsNaN(b) {
			return fmt.Errorf("%w: no edge in the window: the edge line cannot be fitted", ErrMeasure)
		}
		return nil
	}
	if err := fit(rowCentroids(img, w, h, sign, nil, 0)); err != nil {
		return nil, err
	}
	// The outer parts of the window (beyond margin of the edge) must be
	// flat: they fix the background slope, and bound the centroid search.
	margin := math.Max(3, float64(w)/6)
	removeTilt(img, w, h, a, b, margin)
	for pass := 0; pass < 3; pass++ {
		aa, bb := a, b
		if err := fit(rowCentroids(img, w, h, sign, func(y int) float64 { return aa + bb*float64(y) }, margin)); err != nil {
			return nil, err
		}
	}
	if rms > 1.5 {
		return nil, fmt.Errorf("%w: no straight edge in the window: the transition points scatter by %.2g pixels around a line", ErrMeasure, rms)
	}
	ang := math.Atan(b) * 180 / math.Pi
	if math.Abs(ang) < EdgeMinDeg {
		return nil, fmt.Errorf("%w: the edge is %.2f degrees off the pixel axis; the slanted-edge method needs %g-%g degrees (at least %g)", ErrMeasure, ang, EdgeSafeMinDeg, EdgeSafeMaxDeg, EdgeMinDeg)
	}
	if math.Abs(ang) > EdgeMaxDeg {
		return nil, fmt.Errorf("%w: the edge is %.1f degrees off the pixel axis; the slanted-edge method needs %g-%g degrees (at most %g)", ErrMeasure, ang, EdgeSafeMinDeg, EdgeSafeMaxDeg, EdgeMaxDeg)
	}
	res := &EdgeResult{AngleDeg: ang, Low: lo, High: hi, Noise: noise, SNR: math.Abs(step) / math.Max(noise, 1e-30)}
	if math.Abs(ang) < EdgeSafeMinDeg || math.Abs(ang) > EdgeSafeMaxDeg {
		res.Warnings = append(res.Warnings, fmt.Sprintf("edge angle %.1f degrees is outside the safe range %g-%g", ang, EdgeSafeMinDeg, EdgeSafeMaxDeg))
	}
	for _, q := range []float64{1.0 / 3, 1.0 / 2} {
		if math.Abs(math.Abs(b)-q) < 0.02 {
			res.Warnings = append(res.Warnings, fmt.Sprintf("edge slope %.3f is close to 1/%d: phases repeat, bins fill unevenly", math.Abs(b), int(math.Round(1/q))))
		}
	}
	// Whole number of phase cycles: the edge moves one pixel every 1/|b|
	// lines.
	cycles := math.Floor(float64(h) * math.Abs(b))
	if cycles < 1 {
		return nil, fmt.Errorf("%w: the window is %d lines long; an edge at %.2f degrees needs at least %d lines for one phase cycle", ErrMeasure, h, ang, int(math.Ceil(1/math.Abs(b))))
	}
	rows := int(math.Floor(cycles / math.Abs(b)))
	rows = min(max(rows, 1), h)
	y0 := (h - rows) / 2
	res.Rows = rows
	// The edge must stay inside the window with room for the ESF tails.
	for _, y := range []int{y0, y0 + rows - 1} {
		if x := a + b*float64(y); x < 3 || x > float64(w-4) {
			return nil, fmt.Errorf("%w: the edge leaves the window (at line %d it crosses column %.1f of %d); centre the window on the edge", ErrMeasure, y, x, w)
		}
	}
	// Projection into 1/4-pixel bins of the horizontal distance to the
	// edge line, centred on the edge's mean position.
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
	// Use the span of bins reached from both sides (edge near a window
	// side leaves outer bins empty).
	first, last := 0, nb-1
	for first < nb && cnt[first] == 0 {
		first++
	}
	for last >= 0 && cnt[last] == 0 {
		last--
	}
	esf := make([]float64, 0, last-first+1)
	for k := first; k <= last; k++ {
		if cnt[k] > 0 {
			esf = append(esf, sum[k]/cnt[k])
		} else {
			esf = append(esf, math.NaN())
		}
	}
	// Empty bins (a few, at unlucky slopes) take their neighbours' mean.
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
	n := len(esf)
	if n < 4*BinsPerPixel {
		return nil, fmt.Errorf("%w: too few ESF bins (%d)", ErrMeasure, n)
	}
	// LSF: [-1/2, 0, 1/2] derivative, oriented so the step is positive.
	lsf := make([]float64, n)
	for i := 1; i < n-1; i++ {
		lsf[i] = sign * 0.5 * (esf[i+1] - esf[i-1])
	}
	lsf[0], lsf[n-1] = lsf[1], lsf[n-2]
	// Background slope: the LSF tails' mean (outer eighth on each side) is
	// the background gradient; remove it.
	tail := max(2, n/8)
	var off float64
	for i := 0; i < tail; i++ {
		off += lsf[i] + lsf[n-1-i]
	}
	off /= float64(2 * tail)
	for i := range lsf {
		lsf[i] -= off
	}
	cosA := math.Cos(ang * math.Pi / 180)
	binW := 1.0 / BinsPerPixel // horizontal units
	res.ESF, res.LSF, res.ESFStep = esf, lsf, binW*cosA
	// Centroid (within 3 FWHM of the peak: the tails are noise), then a
	// Hamming window centred on it; the DFT is taken with the centroid as
	// origin (a shift only changes the phase). The window spans
	// HammingFWHM times the FWHM, at least HammingMinPixels pixels (or the
	// whole LSF): ISO 12233 windows the whole LSF, which at low SNR lets the
	// flat tails' noise raise the e-SFR floor; a window many FWHM wide
	// removes that noise and changes a Gaussian LSF's variance by under
	// 1 % (derived from the window's curvature, 0.46 (2 pi / L)^2 / 2).
	fw := fwhm(lsf)
	if math.IsNaN(fw) || fw <= 0 {
		return nil, fmt.Errorf("%w: no edge in the window: the line spread function has no clear peak", ErrMeasure)
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
		return nil, fmt.Errorf("%w: no edge in the window: the line spread function has no positive area", ErrMeasure)
	}
	c := s1 / s0
	var v0, v2 float64
	for i, v := range lsf {
		if d := float64(i) - c; math.Abs(d) <= 3*fw {
			v0 += v
			v2 += v * d * d
		}
	}
	vLSF := v2 / v0 * res.ESFStep * res.ESFStep
	res.SigmaLSF = math.Sqrt(math.Max(vLSF-1.0/12, 0))
	wl := math.Min(float64(n), math.Max(HammingMinPixels*BinsPerPixel, HammingFWHM*fw))
	sfr := sfrPipeline{n: n, c: c, wl: wl, binW: binW, cosA: cosA}
	res.Freq = make([]float64, n/2+1)
	res.MTF = make([]float64, n/2+1)
	for k := range res.Freq {
		res.Freq[k] = sfr.freq(k)
	}
	sfr.mtf(lsf, res.MTF, nil)
	res.MTFNyquist = interpAt(res.Freq, res.MTF, 0.5)
	res.MTF50 = crossing(res.Freq, res.MTF, 0.5)
	res.FWHM = fwhm(lsf) * res.ESFStep
	res.Sigma, res.FitRMS, res.FitMax = fitSigma(res.Freq, res.MTF, sfr)
	if res.SNR < 20 {
		res.Warnings = append(res.Warnings, fmt.Sprintf("edge contrast %.3g DN is only %.1f times the noise; at least 20 is advisable (common practice, no source)", math.Abs(step), res.SNR))
	}
	if lo > 0 && hi > 0 {
		if mc := math.Abs(hi-lo) / (hi + lo); mc > 0.9 {
			res.Warnings = append(res.Warnings, fmt.Sprintf("edge modulation %.2f is very high: check the bright side for clipping (ISO 12233 recommends a reduced contrast)", mc))
		}
	}
	return res, nil
}

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

func (p sfrPipeline) freq(k int) float64 { return float64(k) / (float64(p.n) * p.binW) / p.cosA }

// mtf writes the e-SFR of lsf at every k (ks nil) or at the listed ks.
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
// times the binning and derivative responses (GUIDE section 2).
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

// golden minimises a unimodal function on [a, b] (golden-section search,
// Kiefer 1953), after a coarse scan that brackets the minimum.
func golden(f func(float64) float64, a, b float64) float64 {
	// coarse logarithmic scan
	best, bx := math.Inf(1), a
	const steps = 60
	for i := 0; i <= steps; i++ {
		x := a * math.Pow(b/a, float64(i)/steps)
		if v := f(x); v < best {
			best, bx = v, x
		}
	}
	r := math.Pow(b/a, 1.0/steps)
	lo, hi := math.Max(a, bx/r), math.Min(b, bx*r)
	g := (math.Sqrt(5) - 1) / 2
	x1, x2 := hi-g*(hi-lo), lo+g*(hi-lo)
	f1, f2 := f(x1), f(x2)
	for i := 0; i < 100 && hi-lo > 1e-10*hi; i++ {
		if f1 < f2 {
			hi, x2, f2 = x2, x1, f1
			x1 = hi - g*(hi-lo)
			f1 = f(x1)
		} else {
			lo, x1, f1 = x1, x2, f2
			x2 = lo + g*(hi-lo)
			f2 = f(x2)
		}
	}
	return 0.5 * (lo + hi)
}

// PointResult is a 2-D Gaussian fit to a point-like target. Positions are
// window coordinates (pixel centres at integers). SigmaX and SigmaY are
// restoration sigmas (aperture removed): the model integrates the Gaussian
// over each pixel.
type PointResult struct {
	X, Y       float64 `json:"-"`
	SigmaX     float64 `json:"sigma_x"`
	SigmaY     float64 `json:"sigma_y"`
	Sigma      float64 `json:"sigma"`
	Amplitude  float64 `json:"flux"`
	Background float64 `json:"background"`
	// RMS is the fit's root-mean-square residual and Noise the window's
	// noise estimate (DN); RMS near Noise means a good fit.
	RMS      float64  `json:"fit_rms"`
	Noise    float64  `json:"noise"`
	Peak     float64  `json:"peak_snr"`
	Warnings []string `json:"warnings,omitempty"`
}

// pointModel is B + A Px(x) Py(y), Px(x) = Phi((x + 1/2 - x0)/sx) -
// Phi((x - 1/2 - x0)/sx): a Gaussian point image integrated over the pixel.
func pointModel(p [6]float64, x, y float64) float64 {
	px := normalCDF((x+0.5-p[2])/p[4]) - normalCDF((x-0.5-p[2])/p[4])
	py := normalCDF((y+0.5-p[3])/p[5]) - normalCDF((y-0.5-p[3])/p[5])
	return p[0] + p[1]*px*py
}

// MeasurePoint fits B + A Px(x) Py(y) (a pixel-integrated Gaussian with
// separate sigmas along x and y, plus a flat background) to a window holding
// one isolated point-like target, by Levenberg-Marquardt least squares
// (Marquardt, J. SIAM 11:431, 1963) with a forward-difference Jacobian.
func MeasurePoint(win []float32, w, h int) (*PointResult, error) {
	if w*h != len(win) || w < 7 || h < 7 {
		return nil, fmt.Errorf("%w: the window is %dx%d; a point fit needs at least 7x7 pixels", ErrMeasure, w, h)
	}
	img := make([]float64, len(win))
	var border []float64
	for i, v := range win {
		if math.IsNaN(float64(v)) || math.IsInf(float64(v), 0) {
			return nil, fmt.Errorf("%w: the window has an invalid pixel at column %d, row %d (nodata?)", ErrMeasure, i%w, i/w)
		}
		img[i] = float64(v)
		if x, y := i%w, i/w; x == 0 || y == 0 || x == w-1 || y == h-1 {
			border = append(border, img[i])
		}
	}
	noise := pixelNoise(img, w, h)
	b0 := median(border)
	ip := 0
	for i, v := range img {
		if math.Abs(v-b0) > math.Abs(img[ip]-b0) {
			ip = i
		}
	}
	peak := img[ip] - b0
	if math.Abs(peak) < 5*math.Max(noise, 1e-30) {
		return nil, fmt.Errorf("%w: no point target in the window: the strongest pixel is %.3g DN from the background against a noise of %.3g DN (flat window?)", ErrMeasure, math.Abs(peak), noise)
	}
	// Start: centroid and moments of the background-subtracted window near
	// the peak.
	var s0, sx, sy float64
	px, py := ip%w, ip/w
	for y := max(0, py-3); y <= min(h-1, py+3); y++ {
		for x := max(0, px-3); x <= min(w-1, px+3); x++ {
			v := (img[y*w+x] - b0) / peak
			if v > 0 {
				s0 += v
				sx += v * float64(x)
				sy += v * float64(y)
			}
		}
	}
	p := [6]float64{b0, peak * 2 * math.Pi, sx / s0, sy / s0, 1, 1}
	cost := func(p [6]float64) float64 {
		var c float64
		for y := 0; y < h; y++ {
			for x := 0; x < w; x++ {
				e := img[y*w+x] - pointModel(p, float64(x), float64(y))
				c += e * e
			}
		}
		return c
	}
	lambda := 1e-3
	cur := cost(p)
	n := w * h
	jac := make([][6]float64, n)
	res := make([]float64, n)
	for it := 0; it < 200; it++ {
		for y := 0; y < h; y++ {
			for x := 0; x < w; x++ {
				i := y*w + x
				m := pointModel(p, float64(x), float64(y))
				res[i] = img[i] - m
				for k := 0; k < 6; k++ {
					q := p
					step := 1e-6 * math.Max(1, math.Abs(q[k]))
					q[k] += step
					jac[i][k] = (pointModel(q, float64(x), float64(y)) - m) / step
				}
			}
		}
		var jtj [6][6]float64
		var jtr [6]float64
		for i := 0; i < n; i++ {
			for a := 0; a < 6; a++ {
				jtr[a] += jac[i][a] * res[i]
				for b := 0; b < 6; b++ {
					jtj[a][b] += jac[i][a] * jac[i][b]
				}
			}
		}
		improved := false
		for try := 0; try < 20; try++ {
			var m [6][7]float64
			for a := 0; a < 6; a++ {
				for b := 0; b < 6; b++ {
					m[a][b] = jtj[a][b]
				}
				m[a][a] += lambda * jtj[a][a]
				m[a][6] = jtr[a]
			}
			d, ok := solveN(m)
			if !ok {
				lambda *= 10
				continue
			}
			q := p
			for k := range q {
				q[k] += d[k]
			}
			if q[4] <= 0.05 || q[5] <= 0.05 {
				lambda *= 10
				continue
			}
			if c := cost(q); c < cur {
				rel := (cur - c) / math.Max(cur, 1e-300)
				p, cur = q, c
				lambda = math.Max(lambda/10, 1e-9)
				improved = true
				if rel < 1e-12 {
					it = 1 << 20
				}
				break
			}
			lambda *= 10
		}
		if !improved {
			break
		}
	}
	r := &PointResult{X: p[2], Y: p[3], SigmaX: p[4], SigmaY: p[5], Sigma: math.Sqrt(p[4] * p[5]),
		Amplitude: p[1], Background: p[0], RMS: math.Sqrt(cur / float64(n)), Noise: noise, Peak: math.Abs(peak) / math.Max(noise, 1e-30)}
	if r.X < 1 || r.Y < 1 || r.X > float64(w-2) || r.Y > float64(h-2) {
		return nil, fmt.Errorf("%w: the point target's fitted centre (%.1f, %.1f) is at the window border; centre the window on the target", ErrMeasure, r.X, r.Y)
	}
	if 3*math.Max(r.SigmaX, r.SigmaY) > float64(min(w, h))/2 {
		r.Warnings = append(r.Warnings, fmt.Sprintf("fitted sigma %.2f px is large for a %dx%d window: use a window at least 6 sigma wide", math.Max(r.SigmaX, r.SigmaY), w, h))
	}
	if r.Peak < 20 {
		r.Warnings = append(r.Warnings, fmt.Sprintf("the target's peak is only %.1f times the noise; at least 20 is advisable (common practice, no source)", r.Peak))
	}
	if r.RMS > 2*math.Max(noise, 1e-30) {
		r.Warnings = append(r.Warnings, fmt.Sprintf("fit residual %.3g DN is %.1f times the noise: the target may not be point-like or isolated", r.RMS, r.RMS/noise))
	}
	return r, nil
}

// solveN solves a 6x6 augmented system (see gaussSolve).
func solveN(m [6][7]float64) ([6]float64, bool) {
	rows := make([][]float64, 6)
	for r := range rows {
		rows[r] = m[r][:]
	}
	var x [6]float64
	ok := gaussSolve(rows, x[:], 1e-300)
	return x, ok
}
