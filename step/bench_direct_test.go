package step

import (
	"testing"

	"limpid/psf"
	"limpid/step/conv"
)

// BenchmarkGridEMS512Direct uses a small turned anisotropic PSF (sx 1,
// sy 0.6, 30 degrees: 9 x 7 = 63 taps, non-separable), which conv.New
// convolves directly: the direct path's throughput for scripts/bench.
func BenchmarkGridEMS512Direct(b *testing.B) {
	k, _ := psf.GaussianAniso(1, 0.6, 30)
	if kind := conv.New(k).Kind(); kind != "direct" {
		b.Fatalf("the kernel takes the %s path, want direct", kind)
	}
	benchKernel(b, k, DefaultSmooth)
}
