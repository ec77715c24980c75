//go:build goexperiment.simd && amd64

package vec

import (
	"simd/archsimd"
	"testing"
)

// corrArchsimd is the column pass of Corr (one tap per row) written with
// Go 1.26's experimental simd/archsimd, kept only to measure that route
// against the assembly (DEVELOPERS.md, "Vector kernels"); it builds only
// with GOEXPERIMENT=simd:
//
//	GOEXPERIMENT=simd go test -run '^$' -bench 'Column' ./step/internal/vec
func corrArchsimd(dst, src []float32, offs []int, k []float32) {
	n := len(dst)
	i := 0
	for ; i+32 <= n; i += 32 {
		var a0, a1, a2, a3 archsimd.Float32x8
		for t, o := range offs {
			kt := archsimd.BroadcastFloat32x8(k[t])
			s := src[o+i : o+i+32]
			a0 = kt.MulAdd(archsimd.LoadFloat32x8Slice(s[0:8]), a0)
			a1 = kt.MulAdd(archsimd.LoadFloat32x8Slice(s[8:16]), a1)
			a2 = kt.MulAdd(archsimd.LoadFloat32x8Slice(s[16:24]), a2)
			a3 = kt.MulAdd(archsimd.LoadFloat32x8Slice(s[24:32]), a3)
		}
		a0.StoreSlice(dst[i : i+8])
		a1.StoreSlice(dst[i+8 : i+16])
		a2.StoreSlice(dst[i+16 : i+24])
		a3.StoreSlice(dst[i+24 : i+32])
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
