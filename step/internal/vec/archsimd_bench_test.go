//go:build goexperiment.simd && amd64

package vec

import (
	"simd/archsimd"
	"testing"
)

// corrArchsimd is the column pass of Corr (one tap per row) written with
// Go 1.26's experimental simd/archsimd (the assembly's blocking: 64 pixels
// in 8 accumulators, then 8), kept only to measure that route
// against the assembly (DEVELOPERS.md, "Vector kernels"); it builds only
// with GOEXPERIMENT=simd:
//
//	GOEXPERIMENT=simd go test -run '^$' -bench 'Column' ./step/internal/vec
func corrArchsimd(dst, src []float32, offs []int, k []float32) {
	n := len(dst)
	i := 0
	// Named accumulators: an array of vectors is kept in memory, not in
	// registers (measured: 4-6x slower).
	for ; i+64 <= n; i += 64 {
		var a0, a1, a2, a3, a4, a5, a6, a7 archsimd.Float32x8
		for t, o := range offs {
			kt := archsimd.BroadcastFloat32x8(k[t])
			s := src[o+i : o+i+64]
			a0 = kt.MulAdd(archsimd.LoadFloat32x8Slice(s[0:8]), a0)
			a1 = kt.MulAdd(archsimd.LoadFloat32x8Slice(s[8:16]), a1)
			a2 = kt.MulAdd(archsimd.LoadFloat32x8Slice(s[16:24]), a2)
			a3 = kt.MulAdd(archsimd.LoadFloat32x8Slice(s[24:32]), a3)
			a4 = kt.MulAdd(archsimd.LoadFloat32x8Slice(s[32:40]), a4)
			a5 = kt.MulAdd(archsimd.LoadFloat32x8Slice(s[40:48]), a5)
			a6 = kt.MulAdd(archsimd.LoadFloat32x8Slice(s[48:56]), a6)
			a7 = kt.MulAdd(archsimd.LoadFloat32x8Slice(s[56:64]), a7)
		}
		d := dst[i : i+64]
		a0.StoreSlice(d[0:8])
		a1.StoreSlice(d[8:16])
		a2.StoreSlice(d[16:24])
		a3.StoreSlice(d[24:32])
		a4.StoreSlice(d[32:40])
		a5.StoreSlice(d[40:48])
		a6.StoreSlice(d[48:56])
		a7.StoreSlice(d[56:64])
	}
	for ; i+8 <= n; i += 8 {
		var a archsimd.Float32x8
		for t, o := range offs {
			a = archsimd.BroadcastFloat32x8(k[t]).MulAdd(archsimd.LoadFloat32x8Slice(src[o+i:o+i+8]), a)
		}
		a.StoreSlice(dst[i : i+8])
	}
	for ; i < n; i++ {
		var acc float32
		for t, o := range offs {
			acc += k[t] * src[o+i]
		}
		dst[i] = acc
	}
}

func BenchmarkColumnArchsimd(b *testing.B) {
	if !archsimd.X86.AVX2() {
		b.Skip("no AVX2")
	}
	c := newColBench()
	for b.Loop() {
		corrArchsimd(c.dst, c.src, c.offs, c.k)
	}
	c.report(b)
}
