package raster

import "math"

// Plane is a float32 pixel plane: pixel (x, y) is Pix[y*Stride+x].
// A sub-plane from View shares Pix with its parent.
type Plane struct {
	Pix    []float32
	W, H   int
	Stride int
}

// NewPlane allocates a zeroed w x h plane.
func NewPlane(w, h int) Plane {
	return Plane{Pix: make([]float32, w*h), W: w, H: h, Stride: w}
}

// Row returns row y (W values).
func (p Plane) Row(y int) []float32 { return p.Pix[y*p.Stride : y*p.Stride+p.W] }

// At returns pixel (x, y).
func (p Plane) At(x, y int) float32 { return p.Pix[y*p.Stride+x] }

// View returns the w x h sub-plane at (x, y), sharing pixels.
func (p Plane) View(x, y, w, h int) Plane {
	o := y*p.Stride + x
	end := o + (h-1)*p.Stride + w
	if h == 0 || w == 0 {
		end = o
	}
	return Plane{Pix: p.Pix[o:end], W: w, H: h, Stride: p.Stride}
}

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
