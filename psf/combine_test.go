package psf

import (
	"math"
	"strings"
	"testing"
)

func edgeOf(vertical bool, sigma, mtf50 float64) *EdgeResult {
	return &EdgeResult{Vertical: vertical, Sigma: sigma, MTF50: mtf50, MTFNyquist: sigma / 10, FWHM: 2.5 * sigma, AngleDeg: 4}
}

// Combine follows CombineRule. Source: CombineRule worked by hand on
// invented measurements. x: sigmas 1.0, 1.02, 0.98, 2.0 have the median
// 1.01 and the absolute deviations 0.01, 0.01, 0.03, 0.99, whose median is
// 0.02; the limit is max(3 x 1.4826 x 0.02, 0.1 x 1.01) = 0.101, so 2.0 is
// rejected and sigma_x is the median of the rest, 1.0. y: one edge, 1.5.
// sigma = sqrt(1.0 x 1.5). The e-SFR values are medians over the used
// edges; MTF50 skips the edge without one (NaN).
func TestCombine(t *testing.T) {
	edges := []*EdgeResult{edgeOf(true, 1.0, 0.2), edgeOf(true, 1.02, 0.19), edgeOf(false, 1.5, math.NaN()), edgeOf(true, 0.98, 0.21), edgeOf(true, 2.0, 0.1)}
	point := &PointResult{SigmaX: 7, SigmaY: 7, Sigma: 7}
	est := Combine(edges, point)
	if est.SigmaX == nil || *est.SigmaX != 1.0 || est.SigmaY == nil || *est.SigmaY != 1.5 || est.Sigma == nil || *est.Sigma != math.Sqrt(1.0*1.5) {
		t.Fatalf("sigmas %v %v %v", est.SigmaX, est.SigmaY, est.Sigma)
	}
	if est.SigmaFrom != "edges, both axes" {
		t.Errorf("sigma from %q", est.SigmaFrom)
	}
	wantUsed := []bool{true, true, true, true, false}
	for i, u := range wantUsed {
		if est.Used[i] != u || (est.Rejected[i] == "") != u {
			t.Errorf("edge %d: used %v rejected %q, want used %v", i, est.Used[i], est.Rejected[i], u)
		}
	}
	if !strings.Contains(est.Rejected[4], "sigma 2.000 is 0.990 from the median 1.010 (limit 0.101)") || est.NumUsed() != 4 {
		t.Errorf("rejection %q, %d used", est.Rejected[4], est.NumUsed())
	}
	// Used sigmas 1.0, 1.02, 1.5, 0.98: MTFNyquist = sigma / 10 and FWHM =
	// 2.5 sigma have the medians of 0.1 x and 2.5 x (1.0 + 1.02) / 2; MTF50
	// over 0.2, 0.19, 0.21.
	const tolRound = 1e-15 // the products and means round differently
	if math.Abs(*est.MTFNyquist-0.101) > tolRound || math.Abs(*est.FWHM-2.525) > tolRound || *est.MTF50 != 0.2 || *est.EdgeAngleDeg != 4 {
		t.Errorf("mtf_nyquist %v fwhm %v mtf50 %v angle %v", *est.MTFNyquist, *est.FWHM, *est.MTF50, *est.EdgeAngleDeg)
	}
	// One axis only: that axis, assumed isotropic.
	est = Combine(edges[2:3], nil)
	if est.SigmaX != nil || *est.SigmaY != 1.5 || *est.Sigma != 1.5 || !strings.HasPrefix(est.SigmaFrom, "near-horizontal edges only") || est.MTF50 != nil {
		t.Errorf("one axis: %+v", est)
	}
	// No edge: the point fit; nothing: no sigma.
	est = Combine(nil, point)
	if *est.Sigma != 7 || *est.SigmaX != 7 || est.SigmaFrom != "point target fit" || est.MTFNyquist != nil {
		t.Errorf("point only: %+v", est)
	}
	if est = Combine(nil, nil); est.Sigma != nil || est.SigmaFrom != "" {
		t.Errorf("nothing: %+v", est)
	}
	if _, err := est.Spec(); err == nil {
		t.Error("an empty estimate gives a spec")
	}
}
