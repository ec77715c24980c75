package vec

import "golang.org/x/sys/cpu"

// hasAccel: the assembly kernels need AVX2 (256-bit float lanes and
// VBROADCASTSS from memory) and FMA3 (VFMADD231PS/SS); cpu also checks that
// the OS saves the YMM state.
var hasAccel = cpu.X86.HasAVX2 && cpu.X86.HasFMA

// corrAsm is Corr after its checks, with kw = len(k)/len(offs) >= 1 rows
// of taps and len(dst) >= 1.
//
//go:noescape
func corrAsm(dst, src []float32, offs []int, k []float32, kw int, add bool)

// The elementwise kernels handle len(q) (or len(e)) elements, a multiple of
// 8; the other slices are at least as long.

//go:noescape
func ratioAsm(q, hf, d, m []float32, b float32)

//go:noescape
func updateAsm(e, f, t, s []float32, floor float32)

//go:noescape
func ratioJVPAsm(q, dq, hf, d, m, delta, hu []float32, b float32)

//go:noescape
func updateJVPAsm(e, ue, f, u, t, dt, s []float32, floor float32)

// l1SumsAsm adds |a[i]-b[i]| and |b[i]| to the lanes dl[i%8], nl[i%8] for
// i < len(a), a multiple of 8.
//
//go:noescape
func l1SumsAsm(dl, nl *[8]float64, a, b []float32)
