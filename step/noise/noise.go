package noise

import (
	"fmt"
	"math"
	"slices"

	"limpid/step/conv"
)

// immerkaer is the 3x3 mask [[1,-2,1],[-2,4,-2],[1,-2,1]]: it annihilates
// locally linear (and separable quadratic) intensity; its squared sum is 36.
var immerkaer = [9]float32{1, -2, 1, -2, 4, -2, 1, -2, 1}

// Immerkaer is Immerkaer's (1996) noise sigma of a w x h plane:
// sqrt(pi/2) / (6 n) * sum |I * M| over the n positions whose whole 3x3
// neighbourhood is valid (valid nil: all). It returns NaN with no position.
func Immerkaer(d []float32, valid []bool, w, h int) float64 {
	var sum float64
	n := 0
	for y := 1; y < h-1; y++ {
		for x := 1; x < w-1; x++ {
			if !window3Valid(valid, w, x, y) {
				continue
			}
			sum += math.Abs(float64(mask3(d, w, x, y)))
			n++
		}
	}
	if n == 0 {
		return math.NaN()
	}
	return math.Sqrt(math.Pi/2) / (6 * float64(n)) * sum
}

func window3Valid(valid []bool, w, x, y int) bool {
	if valid == nil {
		return true
	}
	for dy := -1; dy <= 1; dy++ {
		r := (y+dy)*w + x
		if !valid[r-1] || !valid[r] || !valid[r+1] {
			return false
		}
	}
	return true
}

func mask3(d []float32, w, x, y int) float32 {
	var s float64
	k := 0
	for dy := -1; dy <= 1; dy++ {
		r := (y+dy)*w + x
		s += float64(immerkaer[k])*float64(d[r-1]) + float64(immerkaer[k+1])*float64(d[r]) + float64(immerkaer[k+2])*float64(d[r+1])
		k += 3
	}
	return float32(s)
}

// Model is the variance of an observed value d: Var = A*d + B (a
// Poisson-Gaussian sensor: A is the gain in DN per electron, B the read
// variance in DN^2 plus quantisation).
type Model struct {
	A float64 `json:"a"`
	B float64 `json:"b"`
	// SigmaA, SigmaB are the standard errors of the fit (from the weighted
	// residuals of the bins; 0 when given by the user).
	SigmaA float64 `json:"a_stderr"`
	SigmaB float64 `json:"b_stderr"`
	// Floor is the smallest variance Variance returns.
	Floor float64 `json:"variance_floor"`
	// Hi clips d before the model is evaluated (the brightest bin's mean).
	Hi float64 `json:"clip_high"`
	// Source is "estimated" or "given".
	Source string `json:"source"`
	Bins   []Bin  `json:"bins,omitempty"`
	// Samples is the number of pixels the bins were made from.
	Samples int `json:"samples,omitempty"`
}

// Bin is one intensity class of the fit.
type Bin struct {
	Mean     float64 `json:"mean"`
	Variance float64 `json:"variance"`
	Pixels   int     `json:"pixels"`
	Used     bool    `json:"used"`
}

// Variance is the model variance at observed value d, clipped to [0, Hi]
// and floored.
func (m *Model) Variance(d float32) float32 {
	x := float64(d)
	if x < 0 {
		x = 0
	}
	if m.Hi > 0 && x > m.Hi {
		x = m.Hi
	}
	return float32(math.Max(m.A*x+m.B, m.Floor))
}

// Sampler collects, plane by plane, the local statistics the
// Poisson-Gaussian fit needs: for every pixel whose neighbourhood is valid,
// the 3x3 mean, the Immerkaer residual e = (d * M) / 6 (variance equal to
// the pixel's noise variance for white noise), and a smoothness score (the
// gradient magnitude of d smoothed with a Gaussian of sigma 2). Planes from
// several tiles of one band pool into one fit.
type Sampler struct {
	mean, res, grad []float32
	// Limit caps the number of samples kept (0: 4 million); extra pixels
	// are taken with a regular stride.
	Limit int
	seen  int
}

// noiseSmoothSigma is the Gaussian that the smoothness score uses (our
// prototype's value, common practice, no source).
const noiseSmoothSigma = 2.0

// Add samples the pixels of plane d (w x h) inside [x0, x1) x [y0, y1)
// whose 3x3 neighbourhood is valid and inside the plane (tiles pass the
// window they own, without their halo).
func (s *Sampler) Add(d []float32, valid []bool, w, h, x0, y0, x1, y1 int) {
	if w < 3 || h < 3 {
		return
	}
	limit := s.Limit
	if limit <= 0 {
		limit = 4 << 20
	}
	// Invalid pixels take the plane's valid mean before the blur so they do
	// not ring into the smoothness score.
	src, ok := conv.MeanFilled(d, valid, w*h)
	if !ok {
		return
	}
	sm := conv.Blur64(src, w, h, conv.GaussianTaps(noiseSmoothSigma))
	x0, y0 = max(x0, 1), max(y0, 1)
	x1, y1 = min(x1, w-1), min(y1, h-1)
	for y := y0; y < y1; y++ {
		for x := x0; x < x1; x++ {
			if !window3Valid(valid, w, x, y) {
				continue
			}
			s.seen++
			if len(s.mean) >= limit && s.seen%2 == 0 {
				continue
			}
			var box float64
			for dy := -1; dy <= 1; dy++ {
				row := d[(y+dy)*w+x-1:]
				box += float64(row[0]) + float64(row[1]) + float64(row[2])
			}
			gx := 0.5 * (sm[y*w+x+1] - sm[y*w+x-1])
			gy := 0.5 * (sm[(y+1)*w+x] - sm[(y-1)*w+x])
			s.mean = append(s.mean, float32(box/9))
			s.res = append(s.res, mask3(d, w, x, y)/6)
			s.grad = append(s.grad, float32(math.Hypot(gx, gy)))
		}
	}
	if len(s.mean) > 2*limit {
		// Thin by two, keeping every other sample in order.
		k := 0
		for i := 0; i < len(s.mean); i += 2 {
			s.mean[k], s.res[k], s.grad[k] = s.mean[i], s.res[i], s.grad[i]
			k++
		}
		s.mean, s.res, s.grad = s.mean[:k], s.res[:k], s.grad[:k]
	}
}

// Noise fit settings: the binned fit of Foi, Trimeche, Katkovnik &
// Egiazarian (IEEE TIP 17(10):1737-1754, 2008), simplified; the values are
// our prototype's (common practice, no source).
const (
	noiseBins       = 24
	noiseMinPerBin  = 50
	noiseOutlier    = 1.5    // drop bins more than this factor above the fit
	noiseMADToSigma = 0.6745 // median |N(0,1)| (standard normal quantile 0.75)
	noisePasses     = 3
)

// ErrNoData is returned when too few smooth valid pixels exist.
var ErrNoData = fmt.Errorf("too few valid pixels to estimate the noise")

// Fit returns the Poisson-Gaussian model of the collected samples.
func (s *Sampler) Fit() (Model, error) {
	n := len(s.mean)
	if n < noiseBins*noiseMinPerBin/4 {
		return Model{}, ErrNoData
	}
	idx := sortedByMean(s.mean)
	nb := min(noiseBins, n/noiseMinPerBin)
	nb = max(nb, 2)
	var bins []Bin
	scratch := make([]float64, 0, n/nb+1)
	for b := 0; b < nb; b++ {
		part := idx[b*n/nb : (b+1)*n/nb]
		// Keep the smoother half of the bin.
		scratch = scratch[:0]
		for _, i := range part {
			scratch = append(scratch, float64(s.grad[i]))
		}
		gmed := Median(scratch)
		scratch = scratch[:0]
		var mu float64
		for _, i := range part {
			if float64(s.grad[i]) <= gmed {
				scratch = append(scratch, math.Abs(float64(s.res[i])))
				mu += float64(s.mean[i])
			}
		}
		if len(scratch) < 8 {
			continue
		}
		mu /= float64(len(scratch))
		sd := Median(scratch) / noiseMADToSigma
		bins = append(bins, Bin{Mean: mu, Variance: sd * sd, Pixels: len(scratch), Used: true})
	}
	if len(bins) < 2 {
		return Model{}, ErrNoData
	}
	m := fitAffine(bins)
	if bad := func(v float64) bool { return math.IsNaN(v) || math.IsInf(v, 0) }; bad(m.A) || bad(m.B) || bad(bins[len(bins)-1].Mean) {
		return Model{}, ErrNoData
	}
	m.Source = "estimated"
	m.Bins = bins
	m.Samples = n
	m.Hi = bins[len(bins)-1].Mean
	minVar := math.Inf(1)
	for _, b := range bins {
		if b.Variance > 0 {
			minVar = math.Min(minVar, b.Variance)
		}
	}
	if math.IsInf(minVar, 1) {
		minVar = 1e-6
	}
	m.Floor = fitFloor(minVar)
	if !(m.A*bins[0].Mean+m.B > 0) && m.B <= 0 {
		m.B = math.Max(m.B, m.Floor)
	}
	return m, nil
}

// sortedByMean returns the sample indices in increasing order of mean,
// equal means in index order: one sort of 64-bit keys, the mean's float32
// bits mapped to an order-preserving unsigned integer (IEEE 754 total order
// for finite values: flip every bit of a negative, the sign bit of a
// positive; -0 taken as +0) above the index.
func sortedByMean(mean []float32) []int {
	keys := make([]uint64, len(mean))
	for i, m := range mean {
		if m == 0 {
			m = 0 // -0 ties with +0, as < compares them
		}
		b := math.Float32bits(m)
		if b&(1<<31) != 0 {
			b = ^b
		} else {
			b |= 1 << 31
		}
		keys[i] = uint64(b)<<32 | uint64(i)
	}
	slices.Sort(keys)
	idx := make([]int, len(keys))
	for i, k := range keys {
		idx[i] = int(uint32(k))
	}
	return idx
}

// fitAffine fits Variance = a*Mean + b by weighted least squares with weights
// 1/(a mu + b)^2 (the variance of a variance estimate grows with its square),
// noisePasses passes, dropping bins above noiseOutlier x the fit, a >= 0 and
// b >= 0.
func fitAffine(bins []Bin) Model {
	a, b := 0.0, 0.0
	for pass := 0; pass < noisePasses; pass++ {
		var sw, sx, sy, sxx, sxy float64
		for i := range bins {
			bn := &bins[i]
			if pass > 0 {
				fit := a*bn.Mean + b
				bn.Used = !(fit > 0 && bn.Variance > noiseOutlier*fit)
			}
			if !bn.Used {
				continue
			}
			// The first pass weights by pixel count only (weighting by a
			// bin's own noisy variance favours the bins that came out low).
			w := float64(bn.Pixels)
			if pass > 0 {
				v := a*bn.Mean + b
				if !(v > 0) {
					v = math.Max(bn.Variance, 1e-12)
				}
				w /= v * v
			}
			sw += w
			sx += w * bn.Mean
			sy += w * bn.Variance
			sxx += w * bn.Mean * bn.Mean
			sxy += w * bn.Mean * bn.Variance
		}
		det := sw*sxx - sx*sx
		if sw == 0 {
			break
		}
		if det > 1e-12*sw*sxx {
			a = (sw*sxy - sx*sy) / det
			b = (sy - a*sx) / sw
		} else {
			a, b = 0, sy/sw
		}
		if a < 0 {
			a, b = 0, sy/sw
		}
		if b < 0 {
			// A negative variance at zero signal is not physical (read
			// noise and quantisation are >= 0): fit through the origin.
			a, b = sxy/sxx, 0
			if !(a >= 0) {
				a, b = 0, math.Max(sy/sw, 0)
			}
		}
	}
	// Standard errors from the weighted residuals (n - 2 degrees of
	// freedom), weights as in the last pass.
	var sw, sx, sxx, rss float64
	used := 0
	for _, bn := range bins {
		if !bn.Used {
			continue
		}
		fit := a*bn.Mean + b
		if !(fit > 0) {
			fit = math.Max(bn.Variance, 1e-12)
		}
		w := float64(bn.Pixels) / (fit * fit)
		sw += w
		sx += w * bn.Mean
		sxx += w * bn.Mean * bn.Mean
		r := bn.Variance - fit
		rss += w * r * r
		used++
	}
	m := Model{A: a, B: b}
	if det := sw*sxx - sx*sx; used > 2 && det > 0 {
		s2 := rss / float64(used-2)
		m.SigmaA = math.Sqrt(s2 * sw / det)
		m.SigmaB = math.Sqrt(s2 * sxx / det)
	}
	return m
}

// Median is the median of v (the mean of the middle two for an even
// count; NaN for none). It reorders v.
func Median(v []float64) float64 {
	n := len(v)
	if n == 0 {
		return math.NaN()
	}
	if n%2 == 1 {
		return selectKth(v, n/2)
	}
	hi := selectKth(v, n/2)
	// After the selection every value below n/2 is <= hi: the lower
	// middle is their largest.
	lo := v[0]
	for _, x := range v[1 : n/2] {
		lo = math.Max(lo, x)
	}
	return 0.5 * (lo + hi)
}

// selectKth reorders v so that v[k] is its k-th smallest value (0-based),
// everything before it <= v[k] and everything after >= v[k], and returns
// it: quickselect (Hoare, CACM 4(7):321, 1961, "FIND") with a three-way
// partition (Dijkstra's Dutch national flag), which keeps runs of equal
// values linear, and the median of three as the pivot. NaN-free input.
func selectKth(v []float64, k int) float64 {
	lo, hi := 0, len(v)-1
	for lo < hi {
		mid := lo + (hi-lo)/2
		a, b, c := v[lo], v[mid], v[hi]
		p := math.Max(math.Min(a, b), math.Min(math.Max(a, b), c))
		// v[lo:lt] < p, v[lt:i] == p, v[gt+1:hi+1] > p.
		lt, i, gt := lo, lo, hi
		for i <= gt {
			switch x := v[i]; {
			case x < p:
				v[lt], v[i] = v[i], v[lt]
				lt++
				i++
			case x > p:
				v[i], v[gt] = v[gt], v[i]
				gt--
			default:
				i++
			}
		}
		switch {
		case k < lt:
			hi = lt - 1
		case k > gt:
			lo = gt + 1
		default:
			return p
		}
	}
	return v[k]
}

// Merge appends o's samples to s (o's Limit is not applied again).
func (s *Sampler) Merge(o *Sampler) {
	s.mean = append(s.mean, o.mean...)
	s.res = append(s.res, o.res...)
	s.grad = append(s.grad, o.grad...)
}

// Model is the Poisson-Gaussian fit of the samples, with its fallbacks: one
// constant variance from Immerkaer's estimate over the residuals there are
// when the intensity fit fails; with fewer than 9 residuals, no model (A =
// B = 0, Source says why; the caller then restores with fixed settings).
func (s *Sampler) Model() Model {
	m, err := s.Fit()
	if err == nil {
		return m
	}
	m = Model{Source: "none: " + err.Error(), Samples: len(s.res)}
	if len(s.res) >= 9 {
		var sum float64
		for _, e := range s.res {
			sum += math.Abs(float64(e))
		}
		sig := math.Sqrt(math.Pi/2) * sum / float64(len(s.res))
		if math.IsInf(sig, 0) || math.IsNaN(sig) {
			sig = 0
		}
		m = Model{B: sig * sig, Floor: constantFloor(sig * sig), Source: "immerkaer (too few pixels for the intensity fit)", Samples: len(s.res)}
	}
	return m
}

// The variance floors: the smallest variance a model returns, so that the
// weights 1/var of the automatic choice stay finite on dark pixels. Each
// kind of model has its rule (our prototype's values, common practice, no
// source); they live together here so that they are changed together.

// fitFloor is a fitted model's floor: a tenth of its smallest bin variance.
func fitFloor(minVar float64) float64 { return 0.1 * minVar }

// constantFloor is the floor of a constant-variance fallback v: a tenth of
// it, at least 1e-6.
func constantFloor(v float64) float64 { return math.Max(1e-6, 0.1*v) }

// GivenFloor is the floor of a model var = A DN + B given by the user:
// 1 % of B, at least 1e-6.
func GivenFloor(b float64) float64 { return math.Max(1e-6, 0.01*b) }
