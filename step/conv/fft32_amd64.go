package conv

import "golang.org/x/sys/cpu"

// useAVX selects the AVX butterflies of fft32_amd64.s (cpu also checks that
// the OS saves the YMM state). A variable so tests can run the portable Go.
var useAVX = cpu.X86.HasAVX

//go:noescape
func stage4AVX(src *complex64, stride int, dst *complex64, n int, w *complex64, mask *[8]uint32)

//go:noescape
func stage2AVX(src *complex64, stride int, dst *complex64, n int, w *complex64)

//go:noescape
func cmulAVX(b, k *complex64, n int, neg *[8]uint32)

//go:noescape
func stage3AVX(src *complex64, stride int, dst *complex64, n int, w *complex64, mask *[8]uint32, c *[4]float32)

//go:noescape
func stage5AVX(src *complex64, stride int, dst *complex64, n int, w *complex64, mask *[8]uint32, c *[4]float32)

//go:noescape
func transposeAVX(dst *complex64, ds int, src *complex64, ss int, rows, cols int)
