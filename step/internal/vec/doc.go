// Package vec holds limpid's vectorised float32 kernels: the correlation
// that every convolution pass reduces to (the separable row and column
// passes, the direct 2-D kernel and their adjoints, package conv), the
// elementwise EMS updates (package step) and the sums of the relative L1
// change (package plane).
//
// Each exported function has a portable Go implementation and, on amd64
// CPUs with AVX2 and FMA (golang.org/x/sys/cpu), a Go assembly one that
// processes 8 float32 lanes per YMM register (Intel 64 and IA-32
// Architectures Software Developer's Manual, vol. 2: VFMADD231PS,
// VBROADCASTSS, VMOVUPS, VCMPPS, VBLENDVPS, VDIVPS; Go's assembler syntax:
// https://go.dev/doc/asm). The choice is made once at start-up, so a process
// always takes the same path and results stay identical for any number of
// workers; SetPortable forces the portable path (tests and benchmarks).
//
// Corr accumulates with fused multiply-adds on the vector path, so its
// results differ from the portable path by float32 rounding (a few ulps
// times the tap count); CorrPortable always takes the portable path (for
// results that must not depend on the machine). The elementwise kernels and
// L1Sums use the same IEEE operations in the same order as their portable
// twins and agree bit for bit. The route (assembly rather than Go's experimental simd/archsimd,
// which needs GOEXPERIMENT=simd at build time) is explained with its
// measurement in DEVELOPERS.md, "Vector kernels".
package vec
