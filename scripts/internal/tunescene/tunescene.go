package tunescene

import (
	"context"
	"time"

	"fmt"
	"limpid/raster"
	"limpid/step"
	"limpid/step/conv"
	"limpid/step/mix"
	scenes "limpid/step/scene"
	"math"
	"math/rand/v2"

	"limpid/psf"
)

// Scene is one tuning scene: the reference, its degraded observation and
// the blur that made it.
type Scene struct {
	Name     string
	Ref, Obs []float32
	Sigma    float64 // Gaussian PSF sigma, pixels
	Noise    scenes.Sensor
}

// Noises are the two Poisson-Gaussian levels: gain 0.4 DN/e- with 3 DN read
// noise ("-n0"), 0.15 DN/e- with 2 DN ("-n1").
var Noises = []scenes.Sensor{{Gain: 0.4, Read: 3}, {Gain: 0.15, Read: 2}}

// townAt is an invented town: blocks of roofs of varying brightness between
// streets, with courtyards and a park.
func townAt(u, v float64) float64 {
	const block = 23.0
	bi, bj := math.Floor(u/block), math.Floor(v/(block*1.3))
	lu, lv := u-bi*block, v-bj*block*1.3
	if lu < 4 || lv < 4 {
		return 900 // street
	}
	hsh := mix.Pair(int(bi), int(bj))
	if hsh%7 == 0 {
		return 700 + 150*math.Sin(u*0.4)*math.Cos(v*0.3) // park
	}
	if lu > 9 && lu < 15 && lv > 10 && lv < 18 {
		return 500 // courtyard shadow
	}
	return 1400 + float64(hsh>>16%1600)
}

// terrainAt is smooth invented relief shading (low frequencies only).
func terrainAt(u, v float64) float64 {
	return 1600 + 500*math.Sin(u/17)*math.Cos(v/23) + 300*math.Sin((u+v)/9) + 150*math.Cos(u/5.5-v/13)
}

// Scenes returns the 36 scenes at n x n pixels (the valley contents are the
// same for every n <= 320), named CONTENT-sSIGMA-nLEVEL,
// rounded and clipped to 12 bits. The random stream is fixed, so the scenes
// are the same on every run.
func Scenes(n int) ([]Scene, error) {
	// The valley is 700 pixels a side for the tuning scenes (n <= 320);
	// larger n (scripts/choicebudget) draws a larger valley.
	vs := max(700, n+400)
	valley, _ := scenes.ValleyReference(vs, vs)
	crop := func(plane []float32, x0, y0 int) []float32 {
		out := make([]float32, n*n)
		for y := 0; y < n; y++ {
			copy(out[y*n:(y+1)*n], plane[(y0+y)*vs+x0:])
		}
		return out
	}
	render := func(fn func(u, v float64) float64) []float32 {
		out := make([]float32, n*n)
		for y := 0; y < n; y++ {
			for x := 0; x < n; x++ {
				var s float64
				for sy := 0; sy < 4; sy++ {
					for sx := 0; sx < 4; sx++ {
						s += fn(float64(x)+(float64(sx)+0.5)/4, float64(y)+(float64(sy)+0.5)/4)
					}
				}
				out[y*n+x] = float32(s / 16)
			}
		}
		return out
	}
	contents := []struct {
		name string
		ref  []float32
	}{
		{"fields-red", crop(valley[2], 300, 60)},
		{"fields-nir", crop(valley[3], 120, 300)},
		{"river-roads", crop(valley[1], 40, 380)},
		{"tarp-points", crop(valley[0], 380, 40)},
		{"town", render(townAt)},
		{"terrain", render(terrainAt)},
	}
	var out []Scene
	rng := rand.New(rand.NewPCG(99, 100))
	for _, c := range contents {
		for _, sg := range []float64{1, 1.5, 2} {
			for ni, nz := range Noises {
				k, err := psf.GaussianIso(sg)
				if err != nil {
					return nil, err
				}
				valid := make([]bool, n*n)
				for i := range valid {
					valid[i] = true
				}
				obs := scenes.Degrade(c.ref, valid, n, n, conv.New(k), nz, rng)
				for i, v := range obs {
					obs[i] = float32(math.Min(4095, math.Max(0, math.Round(float64(v)))))
				}
				out = append(out, Scene{Name: fmt.Sprintf("%s-s%.1f-n%d", c.name, sg, ni), Ref: c.ref, Obs: obs, Sigma: sg, Noise: nz})
			}
		}
	}
	return out, nil
}

// Interior marks the pixels more than margin from the border (where
// scikit-image's zero padding does not reach).
func Interior(n, margin int) []bool {
	in := make([]bool, n*n)
	for y := margin; y < n-margin; y++ {
		for x := margin; x < n-margin; x++ {
			in[y*n+x] = true
		}
	}
	return in
}

// Ones is an all-valid mask of n pixels.
func Ones(n int) []float32 {
	m := make([]float32, n)
	for i := range m {
		m[i] = 1
	}
	return m
}

// Restore restores a one-band n x n UInt16 scene in memory with cfg and
// times it.
func Restore(obs []float32, n int, cfg step.Config) ([]float32, *step.Report, time.Duration, error) {
	src := raster.NewMem(raster.Meta{Width: n, Height: n, DataType: "UInt16", Bands: []raster.BandInfo{{}}})
	copy(src.Bands[0], obs)
	dst := raster.NewMem(src.M)
	start := time.Now()
	rep, err := step.Restore(context.Background(), src, []int{0}, dst, cfg)
	return dst.Bands[0], rep, time.Since(start), err
}
