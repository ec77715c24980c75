package step

import (
	"context"
	"math"
	"math/rand/v2"
	"sort"
	"testing"

	"limpid/psf"
	"limpid/raster"
	"limpid/step/conv"
	"limpid/step/noise"
	"limpid/step/scene"
)

// restorePlaneMasked restores obs (n x n; pixels not valid are nodata) with
// cfg and returns the restored plane.
func restorePlaneMasked(t *testing.T, obs []float32, valid []bool, n int, cfg Config) ([]float32, *Report) {
	t.Helper()
	src := raster.NewMem(raster.Meta{Width: n, Height: n, DataType: "Float32", Bands: []raster.BandInfo{{NoData: -1, HasNoData: true}}})
	for i, v := range obs {
		src.Bands[0][i] = v
		if !valid[i] {
			src.Bands[0][i] = -1
		}
	}
	dst := raster.NewMem(src.M)
	rep, err := Restore(context.Background(), src, []int{0}, dst, cfg)
	if err != nil {
		t.Fatal(err)
	}
	return dst.Bands[0], rep
}

// noiseMapRun restores obs with the grid method at fixed settings and the
// given noise model, with the noise error map.
func noiseMapRun(t *testing.T, obs []float32, valid []bool, n int, k *psf.Kernel, nm *noise.Model, workers int) (img, se []float32, rep *Report) {
	t.Helper()
	unc := raster.NewMem(raster.Meta{Width: n, Height: n, DataType: "Float32", Bands: []raster.BandInfo{{NoData: -1, HasNoData: true}}})
	img, rep = restorePlaneMasked(t, obs, valid, n, Config{PSF: k, Smooth: 0.3, Stop: StopChange, Tolerance: 0, Iterations: 30, Tile: 48,
		Workers: workers, Noise: nm, Uncertainty: unc})
	return img, unc.Bands[0], rep
}

// The grid method's noise error map against a Monte Carlo over noise
// realisations. Source: the definition of the quantity (the standard
// deviation of the restored value over realisations of the data noise,
// estimated empirically from nReal restorations of one scene with the
// same fixed settings); the probe estimate is Hutchinson's (Comm. Statist.
// Simul. Comput. 18(3), 1989) applied to the linearised recursion, so it
// is expected to agree to within the Monte Carlo spread. Acceptance:
// median over valid pixels of reported / empirical in [0.85, 1.15] (the
// project's bar; the empirical standard deviation of 20 realisations
// alone scatters by about 1/sqrt(2 x 19) = 16 % per pixel, which the
// median over thousands of pixels removes). The tiles of 48 pixels put
// blending ramps in the scene, so the linear blend of the map is checked
// too. The map is also bit-for-bit neutral for the image (the derivative
// recursion reproduces EMS's float32 operations) and identical for any
// number of workers (DEVELOPERS.md, "Determinism").
func TestNoiseMapMatchesMonteCarlo(t *testing.T) {
	const n, nReal = 96, 20
	const lo, hi = 0.85, 1.15
	ref, valid := scene.ValleyReference(n, n)
	k, _ := psf.GaussianIso(1.2)
	H := conv.New(k)
	sensor := scene.Sensor{Gain: 0.4, Read: 3}
	nm := &noise.Model{A: sensor.Gain, B: sensor.Read * sensor.Read, Source: "given"}
	rng := rand.New(rand.NewPCG(41, 42))
	var sum, sum2 []float64
	var reported []float32
	for r := 0; r < nReal; r++ {
		obs := scene.Degrade(ref[1], valid, n, n, H, sensor, rng)
		img, se, _ := noiseMapRun(t, obs, valid, n, k, nm, 2)
		if sum == nil {
			sum, sum2 = make([]float64, len(img)), make([]float64, len(img))
			reported = se
			plain, _ := restorePlaneMasked(t, obs, valid, n, Config{PSF: k, Smooth: 0.3, Stop: StopChange, Iterations: 30, Tile: 48, Workers: 2})
			for i := range img {
				if math.Float32bits(img[i]) != math.Float32bits(plain[i]) && !(math.IsNaN(float64(img[i])) && math.IsNaN(float64(plain[i]))) {
					t.Fatalf("pixel %d: %g with the noise map, %g without", i, img[i], plain[i])
				}
			}
			_, se3, _ := noiseMapRun(t, obs, valid, n, k, nm, 3)
			for i := range se {
				if math.Float32bits(se[i]) != math.Float32bits(se3[i]) {
					t.Fatalf("pixel %d: the noise map depends on the number of workers", i)
				}
			}
		}
		for i, v := range img {
			if valid[i] {
				sum[i] += float64(v)
				sum2[i] += float64(v) * float64(v)
			}
		}
	}
	var ratios []float64
	for i := range sum {
		if !valid[i] {
			if !math.IsNaN(float64(reported[i])) {
				t.Fatalf("nodata pixel %d has noise error %g, want NaN", i, reported[i])
			}
			continue
		}
		mean := sum[i] / nReal
		emp := math.Sqrt(max(sum2[i]/nReal-mean*mean, 0) * nReal / (nReal - 1))
		if emp > 0 {
			ratios = append(ratios, float64(reported[i])/emp)
		}
	}
	sort.Float64s(ratios)
	q := func(p float64) float64 { return ratios[int(p*float64(len(ratios)-1))] }
	t.Logf("reported / empirical over %d pixels: 10 %% %.3f, median %.3f, 90 %% %.3f", len(ratios), q(0.1), q(0.5), q(0.9))
	if m := q(0.5); m < lo || m > hi {
		t.Errorf("median reported / empirical noise error %.3f, want within [%.2f, %.2f]", m, lo, hi)
	}
}
