package psf

import "math"

// madSigma is the normal consistency factor of the median absolute
// deviation, 1 / Phi^-1(3/4): 1.4826 MAD estimates the standard deviation of
// Gaussian data (Rousseeuw & Croux, "Alternatives to the median absolute
// deviation", JASA 88:1273, 1993).
const madSigma = 1.4826

// SceneNoise estimates the pixel noise (DN) of a w x h plane (NaN =
// invalid) robustly: secondDiffNoise over every max(1, h/256)-th row, so a
// large scene costs about 256 rows. It is the noise FindEdges and
// MeasureAuto judge candidate edges against.
func SceneNoise(plane []float32, w, h int) float64 {
	return secondDiffNoise(plane, w, h, max(1, h/256))
}

// pixelNoise is secondDiffNoise over every row of a measurement window (the
// windows MeasureEdge and MeasurePoint refuse hold no NaN).
func pixelNoise(img []float64, w, h int) float64 {
	return secondDiffNoise(img, w, h, 1)
}

// secondDiffNoise is a robust estimate of white pixel noise: the MAD sigma
// (madSigma) of the second differences x[i-1] - 2 x[i] + x[i+1] along every
// rowStride-th row, divided by sqrt(6) (derived: for white noise of variance
// v the second difference has variance (1 + 4 + 1) v). Differences touching
// a NaN pixel are skipped; NaN when none is left. Smooth image content
// (locally linear) cancels in the second difference, and the median ignores
// the few differences that straddle an edge.
func secondDiffNoise[T float32 | float64](plane []T, w, h, rowStride int) float64 {
	var d []float64
	for y := 0; y < h; y += rowStride {
		for x := 1; x < w-1; x++ {
			a, b, c := plane[y*w+x-1], plane[y*w+x], plane[y*w+x+1]
			v := float64(a) - 2*float64(b) + float64(c)
			if !math.IsNaN(v) {
				d = append(d, v)
			}
		}
	}
	if len(d) == 0 {
		return math.NaN()
	}
	m := median(d)
	for i := range d {
		d[i] = math.Abs(d[i] - m)
	}
	return madSigma * median(d) / math.Sqrt(6)
}
