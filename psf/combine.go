package psf

import (
	"fmt"
	"math"
)

// Outlier rule of Combine: an edge whose sigma is farther from its axis'
// median than OutlierMADs MAD sigmas (madSigma x MAD), and than
// OutlierMinFraction of the median, is rejected. A 3-sigma cut on the MAD
// scale is the usual robust rule (Rousseeuw & Croux, JASA 88:1273, 1993);
// the 10 % floor keeps edges that agree closely from being rejected for
// tiny differences when the MAD is near zero (no source).
const (
	OutlierMADs        = 3
	OutlierMinFraction = 0.1
)

// CombineRule describes Combine in words (limpid writes it to its JSON
// summaries).
const CombineRule = "per axis: median of the edges' sigmas after rejecting edges more than max(3 x 1.4826 x MAD, 10 % of the median) from the median; sigma = sqrt(sigma_x sigma_y) when both axes are measured, else the measured axis (assumed isotropic), else the point fit; mtf_nyquist, mtf_nyquist_floor, mtf50, fwhm and edge_angle_deg are medians over the used edges"

// Estimate is one PSF estimate combined from several measurements. The
// embedded Measured holds the restoration sigmas (pixels; nil when not
// measured) and gives the equivalent gaussian spec (Measured.Spec). The
// other values describe the system e-SFR (pixel aperture included) and are
// nil without a used edge.
type Estimate struct {
	Measured
	// SigmaFrom says which measurements gave Sigma.
	SigmaFrom string
	// MTFNyquist, MTF50 (cycles/pixel), FWHM (pixels) and EdgeAngleDeg are
	// medians over the used edges (MTF50 over those where the e-SFR falls
	// to 0.5).
	MTFNyquist, MTF50, FWHM, EdgeAngleDeg *float64
	// MTFNyquistFloor is the median of the used edges' noise floors at
	// Nyquist (EdgeResult.MTFNyquistFloor).
	MTFNyquistFloor *float64
	// Used[i] reports whether edge i entered the estimate; Rejected[i] says
	// why not ("" when used).
	Used     []bool
	Rejected []string
}

// NumUsed is the number of edges that entered the estimate.
func (e Estimate) NumUsed() int {
	n := 0
	for _, u := range e.Used {
		if u {
			n++
		}
	}
	return n
}

// Combine merges edge measurements (and optionally a point fit; nil for
// none) into one estimate by CombineRule: per axis (near-vertical edges
// measure x, near-horizontal ones y), the median of the edges' sigmas after
// rejecting outliers (OutlierMADs, OutlierMinFraction); sigma is the
// geometric mean sqrt(sigma_x sigma_y) when both axes are measured, else
// the measured axis (assumed isotropic), else the point fit.
func Combine(edges []*EdgeResult, point *PointResult) Estimate {
	est := Estimate{Used: make([]bool, len(edges)), Rejected: make([]string, len(edges))}
	sx, hx := combineAxis(edges, true, est.Used, est.Rejected)
	sy, hy := combineAxis(edges, false, est.Used, est.Rejected)
	switch {
	case hx && hy:
		est.SigmaX, est.SigmaY, est.Sigma = ptr(sx), ptr(sy), ptr(math.Sqrt(sx*sy))
		est.SigmaFrom = "edges, both axes"
	case hx:
		est.SigmaX, est.Sigma = ptr(sx), ptr(sx)
		est.SigmaFrom = "near-vertical edges only (sigma_y not measured, assumed equal)"
	case hy:
		est.SigmaY, est.Sigma = ptr(sy), ptr(sy)
		est.SigmaFrom = "near-horizontal edges only (sigma_x not measured, assumed equal)"
	case point != nil:
		est.SigmaX, est.SigmaY, est.Sigma = ptr(point.SigmaX), ptr(point.SigmaY), ptr(point.Sigma)
		est.SigmaFrom = "point target fit"
	}
	var nyq, floor, m50, fw, ang []float64
	for i, e := range edges {
		if !est.Used[i] {
			continue
		}
		nyq = append(nyq, e.MTFNyquist)
		floor = append(floor, e.MTFNyquistFloor)
		if !math.IsNaN(e.MTF50) {
			m50 = append(m50, e.MTF50)
		}
		fw = append(fw, e.FWHM)
		ang = append(ang, e.AngleDeg)
	}
	if len(nyq) > 0 {
		est.MTFNyquist, est.FWHM, est.EdgeAngleDeg = ptr(median(nyq)), ptr(median(fw)), ptr(median(ang))
		est.MTFNyquistFloor = ptr(median(floor))
	}
	if len(m50) > 0 {
		est.MTF50 = ptr(median(m50))
	}
	return est
}

// combineAxis applies the outlier rule to the edges of one axis (vertical:
// the near-vertical edges), marks them in used and rejected, and returns
// the median sigma of the kept ones (ok false without any).
func combineAxis(edges []*EdgeResult, vertical bool, used []bool, rejected []string) (sigma float64, ok bool) {
	var idx []int
	var vals []float64
	for i, e := range edges {
		if e.Vertical == vertical {
			idx = append(idx, i)
			vals = append(vals, e.Sigma)
		}
	}
	if len(idx) == 0 {
		return 0, false
	}
	med := median(vals)
	var dev []float64
	for _, v := range vals {
		dev = append(dev, math.Abs(v-med))
	}
	lim := math.Max(OutlierMADs*madSigma*median(dev), OutlierMinFraction*med)
	var kept []float64
	for _, i := range idx {
		if d := math.Abs(edges[i].Sigma - med); d > lim {
			rejected[i] = fmt.Sprintf("sigma %.3f is %.3f from the median %.3f (limit %.3f)", edges[i].Sigma, d, med, lim)
			continue
		}
		used[i] = true
		kept = append(kept, edges[i].Sigma)
	}
	if len(kept) == 0 {
		return 0, false
	}
	return median(kept), true
}

func ptr(v float64) *float64 { return &v }
