// Package conv holds limpid's linear operators on float32 planes: the PSF
// convolution under half-sample symmetric extension with its exact adjoint
// (separable, direct or FFT, chosen per kernel), the EMS smoothing kernels,
// the orthonormal 2-D DCT-II that diagonalises a symmetric convolution with
// these boundaries (Ahmed, Natarajan & Rao, IEEE Trans. Computers C-23:90,
// 1974; the symmetric-convolution property: Martucci, IEEE TSP 42(5):1038,
// 1994), and the one float64 Gaussian blur that statistics use.
//
// The convolution's FFT path uses a float32 mixed-radix (4, 2, 3, 5)
// Stockham FFT of its own, with AVX butterflies on amd64 (fft32.go,
// fft32_amd64.s); the DCT uses gonum v0.17 dsp/fourier (FFTPACK). Operators
// are immutable and shared by workers; each worker owns a Work.
package conv
