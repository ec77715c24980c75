package step

import (
	"context"
	"math/rand/v2"
	"slices"
	"testing"

	"limpid/psf"
	"limpid/raster"
	"limpid/step/conv"
	"limpid/step/scene"
)

// A PSF per band: each band of a four-band scene, blurred by its own
// Gaussian, restored with Config.BandPSF gives exactly the bytes of that
// band when the scene is restored with the band's PSF for every band (bands
// are restored independently: derived from the per-band noise model, choice
// and solver; the risk's random probe depends on the band's index, so the
// reference keeps the index).
func TestBandPSFMatchesBandAlone(t *testing.T) {
	const n = 64
	sigmas := []float64{0.8, 1.0, 1.3, 1.6}
	ref, valid := scene.ValleyReference(n, n)
	meta := raster.Meta{Width: n, Height: n, DataType: "Float32"}
	src := raster.NewMem(meta)
	rng := rand.New(rand.NewPCG(3, 4))
	var ks []*psf.Kernel
	for b, s := range sigmas {
		k, err := psf.GaussianIso(s)
		if err != nil {
			t.Fatal(err)
		}
		ks = append(ks, k)
		src.M.Bands = append(src.M.Bands, raster.BandInfo{})
		src.Bands = append(src.Bands, scene.Degrade(ref[b%len(ref)], valid, n, n, conv.New(k), scene.Sensor{Gain: 0.4, Read: 3}, rng))
	}
	for _, tc := range []struct {
		name string
		set  func(*Config)
	}{
		{"fixed", func(*Config) {}},
		{"noise map", func(c *Config) { c.Uncertainty = raster.NewMem(src.M) }},
		{"auto", func(c *Config) { c.SmoothAuto, c.Stop, c.Iterations, c.Tile = true, StopAuto, 60, 32 }},
		{"auto one tile", func(c *Config) { c.SmoothAuto, c.Stop, c.Iterations = true, StopAuto, 60 }},
		{"discrepancy", func(c *Config) { c.Stop = StopDiscrepancy }},
		{"particle", func(c *Config) {
			c.Method, c.Tile, c.Smooth, c.Iterations = MethodParticle, 32, 0.5, 12
			c.Particle = ParticleConfig{PerPixel: 4, ESSThreshold: 0.5, BurnIn: 6, Batches: 3}
		}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			cfg := baseConfig(ks[0])
			cfg.Overlap = 16 // the same halo for the scene and the bands alone
			tc.set(&cfg)
			all := cfg
			all.BandPSF, all.BandPSFSpec = []*psf.Kernel{nil, ks[1], ks[2], ks[3]}, []string{"", "b", "c", "d"}
			got, rep := restoreMem(t, src, []int{0, 1, 2, 3}, all)
			var gotSE [][]float32
			if all.Uncertainty != nil {
				gotSE = all.Uncertainty.(*raster.Mem).Bands
				all.Uncertainty = raster.NewMem(src.M)
			}
			// The plan's replay (Decide, then Restore with the decisions)
			// gives the same bytes.
			rep0, err := Decide(context.Background(), src, []int{0, 1, 2, 3}, all)
			if err != nil {
				t.Fatal(err)
			}
			all.Decided = rep0.Decided
			replayed, _ := restoreMem(t, src, []int{0, 1, 2, 3}, all)
			for b := range sigmas {
				if !slices.Equal(got.Bands[b], replayed.Bands[b]) {
					t.Errorf("band %d: the replay differs", b+1)
				}
				one := cfg
				one.PSF = ks[b]
				if one.Uncertainty != nil {
					one.Uncertainty = raster.NewMem(src.M)
				}
				want, _ := restoreMem(t, src, []int{0, 1, 2, 3}, one)
				if !slices.Equal(got.Bands[b], want.Bands[b]) {
					t.Errorf("band %d differs from the scene restored with its PSF", b+1)
				}
				if gotSE != nil && sameBits(gotSE[b], one.Uncertainty.(*raster.Mem).Bands[b]) >= 0 {
					t.Errorf("band %d: the noise error map differs from the scene restored with its PSF", b+1)
				}
				if b > 0 && (rep.Bands[b].PSFUsed == nil || rep.Bands[b].PSF != all.BandPSFSpec[b] || rep.Bands[b].PSFUsed.SHA256 != psf.Describe("", ks[b]).SHA256) {
					t.Errorf("band %d records PSF %q %+v", b+1, rep.Bands[b].PSF, rep.Bands[b].PSFUsed)
				}
			}
		})
	}
}
