package assess

import (
	"errors"
	"fmt"
	"math"
	"sort"

	"limpid/psf"
	"limpid/raster"
	"limpid/step/conv"
	"limpid/step/noise"
)

// Plateau is the fraction of ESF bins at each end taken as the
// plateau of the ringing indicator (common practice, no source: far enough
// from the edge that the blurred transition has ended for the window sizes
// of psf.FindEdges, 32 pixels across).
const Plateau = 0.2

// MaxEdges bounds the edges measured per band (cost).
const MaxEdges = 8

// Fidelity is an image's agreement with the reference over the valid
// pixels: PSNR (dB) and SSIM with peak L, and the root-mean-square, mean
// absolute and mean signed difference image - reference (DN). Non-finite
// values mean "not measurable" (no reference, PSNR of identical images).
type Fidelity struct {
	PSNR, SSIM, RMSE, MAE, Bias float64
}

// noFidelity is the Fidelity of a band without a reference.
func noFidelity() Fidelity {
	nan := math.NaN()
	return Fidelity{nan, nan, nan, nan, nan}
}

// Compare is the Fidelity of img against ref over the pixels where valid
// is true (nil: all) of w x h planes, with peak L for PSNR and SSIM.
func Compare(ref, img []float32, valid []bool, w, h int, L float64) Fidelity {
	return compare(newSSIMReference(ref, valid, w, h, L), img, L)
}

// compare is Compare with the reference's SSIM side prepared (shared by
// the observed and restored comparisons).
func compare(s *ssimReference, img []float32, L float64) Fidelity {
	ref, valid := s.ref, s.valid
	var se, ae, be float64
	n := 0
	for i := range ref[:s.w*s.h] {
		if valid != nil && !valid[i] {
			continue
		}
		d := float64(img[i]) - float64(ref[i])
		se += d * d
		ae += math.Abs(d)
		be += d
		n++
	}
	if n == 0 {
		return noFidelity()
	}
	fn := float64(n)
	return Fidelity{PSNR: PSNR(ref, img, valid, L), SSIM: s.against(img),
		RMSE: math.Sqrt(se / fn), MAE: ae / fn, Bias: be / fn}
}

// Gain is f minus base, metric by metric (for a restoration: restored
// minus observed, so positive is better for PSNR and SSIM, negative for
// RMSE and MAE). A gain involving a non-finite value is NaN, including
// infinite PSNRs (identical images) on either side.
func (f Fidelity) Gain(base Fidelity) Fidelity {
	d := func(a, b float64) float64 {
		if math.IsInf(a, 0) || math.IsInf(b, 0) {
			return math.NaN()
		}
		return a - b
	}
	return Fidelity{d(f.PSNR, base.PSNR), d(f.SSIM, base.SSIM), d(f.RMSE, base.RMSE), d(f.MAE, base.MAE), d(f.Bias, base.Bias)}
}

// Band is the result for one band. Non-finite values mean "not
// measurable" (no reference, no edge).
type Band struct {
	Pixels    int
	DataRange float64
	// Observed and Restored are OBSERVED's and RESTORED's fidelity to the
	// reference, over the same pixels with the same peak.
	Observed, Restored               Fidelity
	NoiseObserved, NoiseRestored     float64
	NoiseRule                        string
	Edges                            int
	MTF50Observed, MTF50Restored     float64
	SharpnessGain                    float64
	RingingObserved, RingingRestored float64
	FluxChange                       float64
}

// Peak is the default peak L of PSNR and SSIM for a reference plane of
// data type dtype: the type's range for integer types, else max - min of
// the valid reference pixels (1 when they do not differ).
func Peak(dtype string, ref []float32, valid []bool) float64 {
	if lo, hi, integer := raster.TypeRange(dtype); integer {
		return hi - lo
	}
	lo, hi := math.Inf(1), math.Inf(-1)
	for i, ok := range valid {
		if ok {
			lo, hi = math.Min(lo, float64(ref[i])), math.Max(hi, float64(ref[i]))
		}
	}
	if !(hi > lo) {
		return 1
	}
	return hi - lo
}

// ErrDataRange is wrapped by CheckDataRange's error.
var ErrDataRange = errors.New("bad data range")

// CheckDataRange returns an error wrapping ErrDataRange that names DataRange
// unless L, a peak given for PSNR and SSIM, is positive and finite.
func CheckDataRange(L float64) error {
	if L > 0 && !math.IsInf(L, 0) {
		return nil
	}
	return fmt.Errorf("%w: DataRange %g must be positive and finite", ErrDataRange, L)
}

// Measure compares the restored plane res with the observed plane obs over
// the pixels where valid is true (w x h planes) and, when ref is not nil,
// both with ref over the same pixels, using peak L for PSNR and SSIM.
func Measure(obs, res, ref []float32, valid []bool, w, h int, L float64) Band {
	nan := math.NaN()
	a := Band{Observed: noFidelity(), Restored: noFidelity(), DataRange: L,
		MTF50Observed: nan, MTF50Restored: nan, SharpnessGain: nan, RingingObserved: nan, RingingRestored: nan, FluxChange: nan}
	var so, sr float64
	for i, ok := range valid {
		if ok {
			a.Pixels++
			so += float64(obs[i])
			sr += float64(res[i])
		}
	}
	if a.Pixels == 0 {
		a.NoiseObserved, a.NoiseRestored = nan, nan
		return a
	}
	if so != 0 {
		a.FluxChange = (sr - so) / so
	}
	if ref != nil {
		s := newSSIMReference(ref, valid, w, h, L)
		a.Observed = compare(s, obs, L)
		a.Restored = compare(s, res, L)
	}
	a.NoiseObserved, a.NoiseRule = PlaneNoise(obs, valid, w, h)
	a.NoiseRestored, _ = PlaneNoise(res, valid, w, h)
	a.Edges, a.MTF50Observed, a.MTF50Restored, a.RingingObserved, a.RingingRestored = edgeMetrics(obs, res, valid, w, h)
	if a.Edges > 0 && a.MTF50Observed > 0 {
		a.SharpnessGain = a.MTF50Restored / a.MTF50Observed
	}
	return a
}

// PlaneNoise is assess's noise sigma of a plane and the rule used
// ("highpass"): the robust sigma (1.4826 MAD) of the residual of a Gaussian
// low-pass of sigma 2 px, over the smoothest quarter of the valid pixels
// (ranked by the gradient of a sigma-4 smoothing), divided by the
// high-pass's white-noise gain so that white noise reads as its sigma. The
// residual keeps frequencies above about 0.08 cycles/pixel, where a
// restoration amplifies noise; an estimator of the finest scale only
// (Immerkaer's mask, the noise model) misses that and reads a restored
// image as less noisy. Falls back to Immerkaer's sigma (CVIU
// 64(2):300-302, 1996) when too few pixels qualify ("immerkaer").
func PlaneNoise(p []float32, valid []bool, w, h int) (float64, string) {
	nv := 0
	for _, ok := range valid[:w*h] {
		if ok {
			nv++
		}
	}
	src, _ := conv.MeanFilled(p, valid, w*h)
	if nv < 64 {
		return noise.Immerkaer(p, valid, w, h), "immerkaer"
	}
	g2, g4 := conv.GaussianTaps(2), conv.GaussianTaps(4)
	lo, sm := conv.Blur64(src, w, h, g2), conv.Blur64(src, w, h, g4)
	r2 := (len(g4) - 1) / 2
	type px struct{ grad, res float64 }
	var cand []px
	for y := 1; y < h-1; y++ {
		for x := 1; x < w-1; x++ {
			i := y*w + x
			if !valid[i] || !allValid(valid, w, h, x, y, r2) {
				continue
			}
			gx, gy := sm[i+1]-sm[i-1], sm[i+w]-sm[i-w]
			cand = append(cand, px{gx*gx + gy*gy, src[i] - lo[i]})
		}
	}
	if len(cand) < 256 {
		return noise.Immerkaer(p, valid, w, h), "immerkaer"
	}
	sort.Slice(cand, func(a, b int) bool { return cand[a].grad < cand[b].grad })
	cand = cand[:len(cand)/4]
	res := make([]float64, len(cand))
	for i, c := range cand {
		res[i] = c.res
	}
	m := noise.Median(append([]float64(nil), res...))
	for i := range res {
		res[i] = math.Abs(res[i] - m)
	}
	// White-noise gain of (delta - g x g): sqrt(sum (delta - k)^2) with
	// k = g2 (x) g2 the separable low-pass.
	var sq, c float64
	for _, a := range g2 {
		sq += a * a
	}
	r := (len(g2) - 1) / 2
	c = g2[r] * g2[r]
	gain := math.Sqrt(1 - 2*c + sq*sq)
	return 1.4826 * noise.Median(res) / gain, "highpass"
}

// allValid reports whether the (2r+1)^2 window at (x, y) inside the plane
// is valid (checked on its border and centre cross, enough for masks made
// of regions).
func allValid(valid []bool, w, h, x, y, r int) bool {
	if x-r < 0 || y-r < 0 || x+r >= w || y+r >= h {
		return false
	}
	for k := -r; k <= r; k++ {
		if !valid[(y-r)*w+x+k] || !valid[(y+r)*w+x+k] || !valid[(y+k)*w+x-r] || !valid[(y+k)*w+x+r] || !valid[(y+k)*w+x] || !valid[y*w+x+k] {
			return false
		}
	}
	return true
}

func edgeMetrics(obs, res []float32, valid []bool, w, h int) (n int, mtfO, mtfR, ringO, ringR float64) {
	nan := math.NaN()
	masked := make([]float32, w*h)
	for i, ok := range valid {
		if ok {
			masked[i] = obs[i]
		} else {
			masked[i] = float32(nan)
		}
	}
	wins := psf.FindEdges(masked, w, h, psf.SceneNoise(masked, w, h))
	var mo, mr, ro, rr []float64
	for _, e := range wins {
		if len(mo) == MaxEdges {
			break
		}
		cut := func(p []float32) []float32 {
			out := make([]float32, 0, (e.X1-e.X0)*(e.Y1-e.Y0))
			for y := e.Y0; y < e.Y1; y++ {
				out = append(out, p[y*w+e.X0:y*w+e.X1]...)
			}
			return out
		}
		a, err := psf.MeasureEdge(cut(masked), e.X1-e.X0, e.Y1-e.Y0)
		if err != nil {
			continue
		}
		b, err := psf.MeasureEdge(cut(res), e.X1-e.X0, e.Y1-e.Y0)
		if err != nil {
			continue
		}
		if !(a.MTF50 > 0) || !(b.MTF50 > 0) {
			continue
		}
		mo, mr = append(mo, a.MTF50), append(mr, b.MTF50)
		ro, rr = append(ro, Ringing(a.ESF)), append(rr, Ringing(b.ESF))
	}
	if len(mo) == 0 {
		return 0, nan, nan, nan, nan
	}
	return len(mo), noise.Median(mo), noise.Median(mr), noise.Median(ro), noise.Median(rr)
}

// Ringing is the ringing indicator of an edge spread function (see the
// definitions above): overshoot beyond the plateaus as a fraction of the
// step. It returns NaN for an ESF without a step.
func Ringing(esf []float64) float64 {
	n := len(esf)
	k := int(math.Ceil(Plateau * float64(n)))
	if n < 5 || k < 1 {
		return math.NaN()
	}
	v := append([]float64(nil), esf...)
	if v[n-1]+v[n-2] < v[0]+v[1] {
		for i := range v {
			v[i] = -v[i]
		}
	}
	plateau := func(s []float64) float64 {
		c := append([]float64(nil), s...)
		sort.Float64s(c)
		return noise.Median(c)
	}
	lo, hi := plateau(v[:k]), plateau(v[n-k:])
	if !(hi > lo) {
		return math.NaN()
	}
	mx, mn := v[0], v[0]
	for _, x := range v {
		mx, mn = math.Max(mx, x), math.Min(mn, x)
	}
	return math.Max(0, math.Max(mx-hi, lo-mn)) / (hi - lo)
}
