package scene

import (
	"limpid/step/conv"
	"limpid/step/mix"
	"math"
	"math/rand/v2"
)

// ValleyBands names the demo's bands (reflectance table columns).
var ValleyBands = []string{"blue", "green", "red", "nir"}

// class reflectances (blue, green, red, nir), scaled to 12-bit DN below.
var valleyClass = [][4]float64{
	{0.10, 0.12, 0.16, 0.24}, // 0 bare soil
	{0.05, 0.10, 0.06, 0.42}, // 1 wheat
	{0.04, 0.09, 0.05, 0.50}, // 2 maize
	{0.06, 0.11, 0.08, 0.36}, // 3 grass
	{0.05, 0.08, 0.06, 0.30}, // 4 orchard
	{0.12, 0.12, 0.12, 0.14}, // 5 road
	{0.06, 0.07, 0.05, 0.02}, // 6 river
	{0.45, 0.42, 0.40, 0.38}, // 7 roof
	{0.03, 0.03, 0.03, 0.04}, // 8 tarp dark
	{0.62, 0.62, 0.61, 0.60}, // 9 tarp bright
	{0.04, 0.07, 0.05, 0.22}, // 10 hedgerow
}

const valleyFullScale = 4095 * 0.85 / 0.62 // DN per unit reflectance: the bright tarp sits at 85 % of 12 bits

// valleyAt returns the reflectances at continuous pixel position (u, v).
func valleyAt(u, v float64, w, h float64) [4]float64 {
	// Calibration tarp: a 64-pixel square turned 4 degrees, dark and bright
	// halves meeting along a straight edge.
	tc, ts := math.Cos(4*math.Pi/180), math.Sin(4*math.Pi/180)
	tx, ty := u-0.72*w, v-0.22*h
	a, b := tc*tx+ts*ty, -ts*tx+tc*ty
	if math.Abs(a) < 32 && math.Abs(b) < 32 {
		if a < 0 {
			return valleyClass[8]
		}
		return valleyClass[9]
	}
	// Bright point-like targets (corner reflectors, 0.7 px squares).
	for k := 0; k < 6; k++ {
		px := w * (0.15 + 0.13*float64(k))
		py := h * (0.55 + 0.06*float64(k%3))
		if math.Abs(u-px) < 0.35 && math.Abs(v-py) < 0.35 {
			return [4]float64{0.95, 0.95, 0.95, 0.95}
		}
	}
	// River: a sinuous band.
	ry := 0.68*h + 0.06*h*math.Sin(u/(0.11*w)) + 0.02*h*math.Sin(u/(0.031*w)+1)
	if math.Abs(v-ry) < 5+1.5*math.Sin(u/37) {
		return valleyClass[6]
	}
	// Roads: one diagonal, one along the valley.
	d1 := math.Abs((u-0.1*w)*0.5 - (v-0.05*h)*0.866)
	d2 := math.Abs(v - (0.35*h + 0.05*u))
	if d1 < 2.2 || d2 < 2.6 {
		if d2 < 0.4 {
			return [4]float64{0.3, 0.3, 0.3, 0.3} // centre line
		}
		return valleyClass[5]
	}
	// Farm buildings along the valley road.
	for k := 0; k < 5; k++ {
		bx := w * (0.2 + 0.17*float64(k))
		by := 0.35*h + 0.05*bx - 14
		if math.Abs(u-bx) < 5+float64(k%3) && math.Abs(v-by) < 3+float64(k%2)*2 {
			return valleyClass[7]
		}
	}
	// Field parcels in a grid turned 12 degrees, jittered per parcel.
	fc, fs := math.Cos(12*math.Pi/180), math.Sin(12*math.Pi/180)
	pu, pv := fc*u+fs*v, -fs*u+fc*v
	const cell = 70.0
	ci, cj := int(math.Floor(pu/cell)), int(math.Floor(pv/(cell*0.8)))
	lu, lv := pu-float64(ci)*cell, pv-float64(cj)*cell*0.8
	if lu < 1.5 || lv < 1.5 {
		return valleyClass[10]
	}
	hsh := mix.Pair(ci, cj)
	crop := int(hsh % 5)
	base := valleyClass[crop]
	var tex float64
	switch crop {
	case 0:
		tex = 0.04 * math.Sin(lu*0.21+lv*0.13)
	case 1:
		period := 3.0 + float64(hsh>>8%3)
		tex = 0.10 * math.Sin(2*math.Pi*lu/period)
	case 2:
		tex = 0.14 * math.Sin(2*math.Pi*(lu+lv)/6.5)
	case 3:
		tex = 0.05 * math.Sin(lu*0.7) * math.Cos(lv*0.9)
	case 4:
		if math.Mod(lu, 7) < 3 && math.Mod(lv, 7) < 3 {
			tex = 0.25
		}
	}
	var out [4]float64
	for i := range out {
		out[i] = base[i] * (1 + tex)
	}
	return out
}

// ValleyReference renders the valley's w x h reference in 12-bit DN (one
// plane per ValleyBands entry) and its validity (a slanted swath border on
// the left and a clipped top-right corner are outside the footprint).
func ValleyReference(w, h int) (bands [][]float32, valid []bool) {
	const ss = 4
	bands = make([][]float32, len(ValleyBands))
	for i := range bands {
		bands[i] = make([]float32, w*h)
	}
	valid = make([]bool, w*h)
	fw, fh := float64(w), float64(h)
	for y := 0; y < h; y++ {
		for x := 0; x < w; x++ {
			var acc [4]float64
			for sy := 0; sy < ss; sy++ {
				for sx := 0; sx < ss; sx++ {
					r := valleyAt(float64(x)+(float64(sx)+0.5)/ss, float64(y)+(float64(sy)+0.5)/ss, fw, fh)
					for i := range acc {
						acc[i] += r[i]
					}
				}
			}
			for i := range acc {
				bands[i][y*w+x] = float32(acc[i] / (ss * ss) * valleyFullScale)
			}
			valid[y*w+x] = float64(x) > 10+0.04*float64(y) && float64(x)+float64(h-y) < fw+fh-0.12*fw
		}
	}
	return bands, valid
}

// Sensor is a Poisson-Gaussian sensor noise: DN = Gain * Poisson(signal/Gain)
// + Normal(0, Read^2).
type Sensor struct {
	Gain float64 // DN per photo-electron
	Read float64 // read noise, DN
}

// Degrade blurs the reference with the PSF operator (half-sample symmetric
// boundaries) and adds noise; invalid pixels are left at 0. The blur takes
// the portable kernels (conv.Operator.Portable): the Poisson draws depend on
// the blurred values' last bits, so a simulated scene (and the committed
// fixtures made from one) is the same on every machine.
func Degrade(ref []float32, valid []bool, w, h int, H *conv.Operator, nz Sensor, rng *rand.Rand) []float32 {
	out := make([]float32, w*h)
	var ws conv.Work
	H.Portable().Apply(&ws, out, ref, w, h)
	for i, v := range out {
		if !valid[i] {
			out[i] = 0
			continue
		}
		s := float64(v)
		if nz.Gain > 0 {
			s = nz.Gain * float64(Poisson(rng, math.Max(s, 0)/nz.Gain))
		}
		if nz.Read > 0 {
			s += nz.Read * rng.NormFloat64()
		}
		out[i] = float32(s)
	}
	return out
}

// Poisson draws a Poisson variate of mean lam: below 10, the product of
// uniforms (Knuth, The Art of Computer Programming vol. 2, 3rd ed., sec.
// 3.4.1); above, the transformed rejection with squeeze PTRS of Hörmann
// ("The transformed rejection method for generating Poisson random
// variables", Insurance: Mathematics and Economics 12(1):39-45, 1993), with
// the paper's constants.
func Poisson(r *rand.Rand, lam float64) int64 {
	if lam <= 0 {
		return 0
	}
	if lam < 10 {
		l := math.Exp(-lam)
		k := int64(0)
		p := r.Float64()
		for p > l {
			k++
			p *= r.Float64()
		}
		return k
	}
	slam := math.Sqrt(lam)
	loglam := math.Log(lam)
	b := 0.931 + 2.53*slam
	a := -0.059 + 0.02483*b
	invalpha := 1.1239 + 1.1328/(b-3.4)
	vr := 0.9277 - 3.6224/(b-2)
	for {
		u := r.Float64() - 0.5
		v := r.Float64()
		us := 0.5 - math.Abs(u)
		k := math.Floor((2*a/us+b)*u + lam + 0.43)
		if us >= 0.07 && v <= vr {
			return int64(k)
		}
		if k < 0 || (us < 0.013 && v > us) {
			continue
		}
		lg, _ := math.Lgamma(k + 1)
		if math.Log(v)+math.Log(invalpha)-math.Log(a/(us*us)+b) <= -lam+k*loglam-lg {
			return int64(k)
		}
	}
}

// Night-time scene of the fictional harbour town of Quillhaven (test and
// measurement content only): a dark land background, lit roads with street
// lamps, a quay with floodlights, harbour water with a breakwater, and boats
// with deck lights. Values are photo-electron counts per pixel (mean well
// below 30), so the observation is photon-limited.

// nightAt returns the expected count rate at continuous pixel position
// (u, v) of a w x h scene.
func nightAt(u, v, w, h float64) float64 {
	const land, water = 1.5, 0.4
	shore := 0.55*h + 0.05*h*math.Sin(u/(0.13*w))
	if v > shore {
		// Harbour water, the breakwater and boats.
		bw := math.Abs(v-(shore+0.3*(h-shore))) < 1.2 && u > 0.3*w && u < 0.85*w
		if bw {
			if math.Mod(u, 23) < 1 {
				return 160 // breakwater lamps
			}
			return 6
		}
		for k := 0; k < 9; k++ {
			hsh := mix.Pair(k, 77)
			bx := w * (0.08 + 0.1*float64(k) + 0.02*float64(hsh%5))
			by := shore + 6 + float64(hsh>>8%uint64(math.Max(1, 0.35*(h-shore))))
			lx, ly := (u-bx)*math.Cos(0.3*float64(k))+(v-by)*math.Sin(0.3*float64(k)), -(u-bx)*math.Sin(0.3*float64(k))+(v-by)*math.Cos(0.3*float64(k))
			if math.Abs(lx) < 4+float64(k%3) && math.Abs(ly) < 1.5 {
				if math.Abs(lx) < 0.6 && math.Abs(ly) < 0.6 {
					return 400 // mast light
				}
				return 25 // lit deck
			}
		}
		// Reflections of the quay lights on the water.
		if v-shore < 12 && math.Mod(u, 17) < 1.5 {
			return water + 8*math.Exp(-(v-shore)/4)
		}
		return water
	}
	// Quay: a floodlit strip along the shore.
	if shore-v < 4 {
		if math.Mod(u, 17) < 1.5 && shore-v < 1.5 {
			return 300 // floodlights
		}
		return 40
	}
	// Roads: a grid turned 8 degrees with lamps every 11 pixels.
	c, s := math.Cos(8*math.Pi/180), math.Sin(8*math.Pi/180)
	pu, pv := c*u+s*v, -s*u+c*v
	du, dv := math.Mod(pu+1000, 37), math.Mod(pv+1000, 29)
	if du < 2 || dv < 2 {
		if (du < 1 && math.Mod(pv+1000, 11) < 0.8) || (dv < 1 && math.Mod(pu+1000, 11) < 0.8) {
			return 220 // street lamp
		}
		return 12 // lit road surface
	}
	// Houses: some windows lit.
	hsh := mix.Pair(int(pu/37), int(pv/29))
	if hsh%3 == 0 && du > 8 && du < 14 && dv > 6 && dv < 10 {
		return 18
	}
	return land
}

// NightReference renders the Quillhaven night scene (w x h, photo-electron
// counts; each pixel the mean of a 4x4 supersampled patch).
func NightReference(w, h int) []float32 {
	const ss = 4
	out := make([]float32, w*h)
	fw, fh := float64(w), float64(h)
	for y := 0; y < h; y++ {
		for x := 0; x < w; x++ {
			var acc float64
			for sy := 0; sy < ss; sy++ {
				for sx := 0; sx < ss; sx++ {
					acc += nightAt(float64(x)+(float64(sx)+0.5)/ss, float64(y)+(float64(sy)+0.5)/ss, fw, fh)
				}
			}
			out[y*w+x] = float32(acc / (ss * ss))
		}
	}
	return out
}
