//go:build !amd64

package conv

// useAVX: only amd64 has the vector butterflies; elsewhere the portable Go runs.
var useAVX = false

func stage4AVX(src *complex64, stride int, dst *complex64, n int, w *complex64, mask *[8]uint32) {
	panic("conv: no vector FFT kernels")
}

func stage2AVX(src *complex64, stride int, dst *complex64, n int, w *complex64) {
	panic("conv: no vector FFT kernels")
}

func cmulAVX(b, k *complex64, n int, neg *[8]uint32) { panic("conv: no vector FFT kernels") }

func stage3AVX(src *complex64, stride int, dst *complex64, n int, w *complex64, mask *[8]uint32, c *[4]float32) {
	panic("conv: no vector FFT kernels")
}

func stage5AVX(src *complex64, stride int, dst *complex64, n int, w *complex64, mask *[8]uint32, c *[4]float32) {
	panic("conv: no vector FFT kernels")
}

func transposeAVX(dst *complex64, ds int, src *complex64, ss int, rows, cols int) {
	panic("conv: no vector FFT kernels")
}
