// Package sample picks where a global automatic choice looks: an even grid
// of sample tiles and, inside each, a centred window whose side comes from
// a pixel budget and is rounded down to a 2,3,5-smooth length, the lengths
// conv's mixed-radix FFT transforms (and FFTPACK's radix-2/3/4/5 passes:
// Swarztrauber, "Vectorizing the FFTs", in Parallel Computations, Academic
// Press, 1982), so that the risk estimate's DCT takes its fast route.
package sample
