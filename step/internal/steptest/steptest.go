package steptest

import (
	"limpid/psf"
	"limpid/raster"
	"limpid/step/conv"
	"limpid/step/scene"
	"math"
	"math/rand/v2"
	"testing"
)

// ValleyScene builds an observed in-memory scene of the demo scenario:
// the reference bands of scene.ValleyReference (w x h) blurred by a
// Gaussian PSF of sigma pixels, with Poisson (0.4 DN per electron) and 3 DN
// read noise, rounded (at least 1 on valid pixels), nodata 0 elsewhere. It
// returns the scene, the reference, the validity and the PSF.
func ValleyScene(t testing.TB, w, h int, sigma float64) (*raster.Mem, [][]float32, []bool, *psf.Kernel) {
	t.Helper()
	ref, valid := scene.ValleyReference(w, h)
	k, err := psf.GaussianIso(sigma)
	if err != nil {
		t.Fatal(err)
	}
	H := conv.New(k)
	rng := rand.New(rand.NewPCG(11, 12))
	meta := raster.Meta{Width: w, Height: h, DataType: "Float32"}
	for range ref {
		meta.Bands = append(meta.Bands, raster.BandInfo{NoData: 0, HasNoData: true})
	}
	m := raster.NewMem(meta)
	for b := range ref {
		obs := scene.Degrade(ref[b], valid, w, h, H, scene.Sensor{Gain: 0.4, Read: 3}, rng)
		for i := range obs {
			if valid[i] {
				obs[i] = float32(math.Max(1, math.Round(float64(obs[i]))))
			}
		}
		m.Bands[b] = obs
	}
	return m, ref, valid, k
}

// SmoothScene is n x n smooth invented relief (the Brannock Vale uplands,
// demo scenario) from 300 to 3300 DN, blurred by a sigma-1.5 PSF, with the
// sensor's Poisson-Gaussian noise.
func SmoothScene(t testing.TB, n int, nz scene.Sensor, rng *rand.Rand) []float32 {
	t.Helper()
	ref := make([]float32, n*n)
	for y := 0; y < n; y++ {
		for x := 0; x < n; x++ {
			u, v := float64(x), float64(y)
			ref[y*n+x] = float32(1800 + 1000*math.Sin(u/37)*math.Cos(v/29) + 500*math.Sin((u+v)/23))
		}
	}
	k, err := psf.GaussianIso(1.5)
	if err != nil {
		t.Fatal(err)
	}
	valid := make([]bool, n*n)
	for i := range valid {
		valid[i] = true
	}
	return scene.Degrade(ref, valid, n, n, conv.New(k), nz, rng)
}
