package raster

import "math"

// Mirror maps an index onto [0, n) by half-sample symmetric reflection
// (... 1 0 | 0 1 ... n-1 | n-1 n-2 ...), repeated as often as needed.
func Mirror(i, n int) int {
	if n == 1 {
		return 0
	}
	p := 2 * n
	i %= p
	if i < 0 {
		i += p
	}
	if i >= n {
		i = p - 1 - i
	}
	return i
}

// Valid reports whether v is a usable sample: finite, not nodata, and (when
// saturated is set) below the saturation level.
func Valid(v float32, nodata float64, hasNoData bool, saturated float64, hasSaturated bool) bool {
	f := float64(v)
	if math.IsNaN(f) || math.IsInf(f, 0) {
		return false
	}
	if hasNoData && f == nodata {
		return false
	}
	if hasSaturated && f >= saturated {
		return false
	}
	return true
}
