package simulate

import (
	"context"
	"testing"

	"limpid/psf"
	"limpid/raster"
	"limpid/step/conv"
	"limpid/step/scene"
)

// BenchmarkSimulate1024 measures simulate's per-core throughput on a
// 1024 x 1024 single-band scene (separable Gaussian sigma 1.4, Poisson +
// read noise, UInt16). Report: go test -run '^$' -bench Simulate -cpu 1 ./step.
func BenchmarkSimulate1024(b *testing.B) {
	const n = 1024
	ref, _ := scene.ValleyReference(n, n)
	src := raster.NewMem(raster.Meta{Width: n, Height: n, DataType: "Float32", Bands: []raster.BandInfo{{}}})
	copy(src.Bands[0], ref[2])
	dst := raster.NewMem(src.Meta())
	k, _ := psf.Parse("gaussian:sigma=1.4", psf.Env{})
	cfg := Config{H: conv.New(k), Noise: Noise{Kind: NoisePoisson, Gain: 0.4, Read: 3}, Seed: 1, DataType: "UInt16"}
	b.SetBytes(n * n * 4)
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if err := Simulate(context.Background(), src, dst, cfg); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(n*n)*float64(b.N)/b.Elapsed().Seconds()/1e6, "Mpix/s")
}
