// AVX kernels of the float32 FFT (Go assembler syntax: operands in
// source-first order, https://go.dev/doc/asm; instruction semantics: Intel 64
// and IA-32 Architectures Software Developer's Manual, vol. 2). Complex
// products use the swap / multiply / VADDSUBPS pattern: for x = (xr, xi) and
// a scalar w = (wr, wi), (xr wr - xi wi, xi wr + xr wi) = addsub(x * wr,
// swap(x) * wi), with addsub subtracting in even and adding in odd lanes.

#include "textflag.h"

// func stage4AVX(src *complex64, stride int, dst *complex64, n int, w *complex64, mask *[8]uint32)
//
// One radix-4 butterfly group of stage4: a_j = src + j*stride bytes, b_k =
// dst + k*n*8 bytes, n (a multiple of 4, >= 4) complex values each, twiddles
// w[0..2]; mask flips the sign of the lanes that make (a1 - a3) times -i
// (forward) or +i (inverse) after the swap.
TEXT ·stage4AVX(SB), NOSPLIT, $0-48
	MOVQ src+0(FP), SI
	MOVQ stride+8(FP), R8
	MOVQ dst+16(FP), DI
	MOVQ n+24(FP), CX
	MOVQ w+32(FP), AX
	MOVQ mask+40(FP), BX
	VBROADCASTSS 0(AX), Y8
	VBROADCASTSS 4(AX), Y9
	VBROADCASTSS 8(AX), Y10
	VBROADCASTSS 12(AX), Y11
	VBROADCASTSS 16(AX), Y12
	VBROADCASTSS 20(AX), Y13
	VMOVUPS      (BX), Y15
	LEAQ         (SI)(R8*1), R9
	LEAQ         (R9)(R8*1), R10
	LEAQ         (R10)(R8*1), R11
	MOVQ         CX, DX
	SHLQ         $3, DX
	LEAQ         (DI)(DX*1), R12
	LEAQ         (R12)(DX*1), R13
	LEAQ         (R13)(DX*1), R14
	XORQ         BX, BX
	SHRQ         $2, CX

loop4:
	VMOVUPS   (SI)(BX*1), Y0
	VMOVUPS   (R9)(BX*1), Y1
	VMOVUPS   (R10)(BX*1), Y2
	VMOVUPS   (R11)(BX*1), Y3
	VADDPS    Y2, Y0, Y4
	VSUBPS    Y2, Y0, Y0
	VADDPS    Y3, Y1, Y5
	VSUBPS    Y3, Y1, Y1
	VPERMILPS $0xB1, Y1, Y1
	VXORPS    Y15, Y1, Y1
	VADDPS    Y5, Y4, Y2
	VMOVUPS   Y2, (DI)(BX*1)
	VSUBPS    Y5, Y4, Y4
	VADDPS    Y1, Y0, Y3
	VSUBPS    Y1, Y0, Y0
	VPERMILPS $0xB1, Y3, Y5
	VMULPS    Y9, Y5, Y5
	VMULPS    Y8, Y3, Y3
	VADDSUBPS Y5, Y3, Y3
	VMOVUPS   Y3, (R12)(BX*1)
	VPERMILPS $0xB1, Y4, Y5
	VMULPS    Y11, Y5, Y5
	VMULPS    Y10, Y4, Y4
	VADDSUBPS Y5, Y4, Y4
	VMOVUPS   Y4, (R13)(BX*1)
	VPERMILPS $0xB1, Y0, Y5
	VMULPS    Y13, Y5, Y5
	VMULPS    Y12, Y0, Y0
	VADDSUBPS Y5, Y0, Y0
	VMOVUPS   Y0, (R14)(BX*1)
	ADDQ      $32, BX
	DECQ      CX
	JNZ       loop4
	VZEROUPPER
	RET

// func stage2AVX(src *complex64, stride int, dst *complex64, n int, w *complex64)
//
// One radix-2 butterfly group: a_j = src + j*stride bytes, b_k = dst +
// k*n*8 bytes, n a multiple of 4 (>= 4); b0 = a0 + a1, b1 = (a0 - a1) w[0].
TEXT ·stage2AVX(SB), NOSPLIT, $0-40
	MOVQ         src+0(FP), SI
	MOVQ         stride+8(FP), R8
	MOVQ         dst+16(FP), DI
	MOVQ         n+24(FP), CX
	MOVQ         w+32(FP), AX
	VBROADCASTSS 0(AX), Y8
	VBROADCASTSS 4(AX), Y9
	LEAQ         (SI)(R8*1), R9
	MOVQ         CX, DX
	SHLQ         $3, DX
	LEAQ         (DI)(DX*1), R12
	XORQ         BX, BX
	SHRQ         $2, CX

loop2:
	VMOVUPS   (SI)(BX*1), Y0
	VMOVUPS   (R9)(BX*1), Y1
	VADDPS    Y1, Y0, Y2
	VSUBPS    Y1, Y0, Y0
	VMOVUPS   Y2, (DI)(BX*1)
	VPERMILPS $0xB1, Y0, Y5
	VMULPS    Y9, Y5, Y5
	VMULPS    Y8, Y0, Y0
	VADDSUBPS Y5, Y0, Y0
	VMOVUPS   Y0, (R12)(BX*1)
	ADDQ      $32, BX
	DECQ      CX
	JNZ       loop2
	VZEROUPPER
	RET

// func cmulAVX(b, k *complex64, n int, neg *[8]uint32)
//
// b[i] *= k[i] (neg all zero) or conj(k[i]) (neg all sign bits) for i < n,
// n a multiple of 4 (>= 4).
TEXT ·cmulAVX(SB), NOSPLIT, $0-32
	MOVQ    b+0(FP), DI
	MOVQ    k+8(FP), SI
	MOVQ    n+16(FP), CX
	MOVQ    neg+24(FP), AX
	VMOVUPS (AX), Y15
	XORQ    BX, BX
	SHRQ    $2, CX

loopm:
	VMOVUPS   (DI)(BX*1), Y0
	VMOVUPS   (SI)(BX*1), Y1
	VMOVSLDUP Y1, Y2
	VMOVSHDUP Y1, Y3
	VXORPS    Y15, Y3, Y3
	VPERMILPS $0xB1, Y0, Y4
	VMULPS    Y3, Y4, Y4
	VMULPS    Y2, Y0, Y0
	VADDSUBPS Y4, Y0, Y0
	VMOVUPS   Y0, (DI)(BX*1)
	ADDQ      $32, BX
	DECQ      CX
	JNZ       loopm
	VZEROUPPER
	RET

// CMULW multiplies X in place by the complex scalar at off(AX), using Y8,
// Y9, Y10 as scratch.
#define CMULW(off, X) \
	VBROADCASTSS off(AX), Y8 \
	VBROADCASTSS off+4(AX), Y9 \
	VPERMILPS    $0xB1, X, Y10 \
	VMULPS       Y9, Y10, Y10 \
	VMULPS       Y8, X, X \
	VADDSUBPS    Y10, X, X

// func stage3AVX(src *complex64, stride int, dst *complex64, n int, w *complex64, mask *[8]uint32, c *[4]float32)
//
// One radix-3 butterfly group (stage3): c[0] = 1/2, c[1] = sqrt(3)/2;
// b0 = a0 + t, b1 = (a0 - t/2 + u) w[0], b2 = (a0 - t/2 - u) w[1] with
// t = a1 + a2 and u = -+i sqrt(3)/2 (a1 - a2).
TEXT ·stage3AVX(SB), NOSPLIT, $0-56
	MOVQ         src+0(FP), SI
	MOVQ         stride+8(FP), R8
	MOVQ         dst+16(FP), DI
	MOVQ         n+24(FP), CX
	MOVQ         w+32(FP), AX
	MOVQ         mask+40(FP), BX
	MOVQ         c+48(FP), DX
	VMOVUPS      (BX), Y15
	VBROADCASTSS 0(DX), Y13
	VBROADCASTSS 4(DX), Y14
	LEAQ         (SI)(R8*1), R9
	LEAQ         (R9)(R8*1), R10
	MOVQ         CX, DX
	SHLQ         $3, DX
	LEAQ         (DI)(DX*1), R12
	LEAQ         (R12)(DX*1), R13
	XORQ         BX, BX
	SHRQ         $2, CX

loop3:
	VMOVUPS   (SI)(BX*1), Y0
	VMOVUPS   (R9)(BX*1), Y1
	VMOVUPS   (R10)(BX*1), Y2
	VADDPS    Y2, Y1, Y3
	VSUBPS    Y2, Y1, Y1
	VADDPS    Y3, Y0, Y4
	VMOVUPS   Y4, (DI)(BX*1)
	VMULPS    Y13, Y3, Y3
	VSUBPS    Y3, Y0, Y0
	VMULPS    Y14, Y1, Y1
	VPERMILPS $0xB1, Y1, Y1
	VXORPS    Y15, Y1, Y1
	VADDPS    Y1, Y0, Y2
	CMULW(0, Y2)
	VMOVUPS   Y2, (R12)(BX*1)
	VSUBPS    Y1, Y0, Y0
	CMULW(8, Y0)
	VMOVUPS   Y0, (R13)(BX*1)
	ADDQ      $32, BX
	DECQ      CX
	JNZ       loop3
	VZEROUPPER
	RET

// func stage5AVX(src *complex64, stride int, dst *complex64, n int, w *complex64, mask *[8]uint32, c *[4]float32)
//
// One radix-5 butterfly group (stage5): c = {cos 2pi/5, cos 4pi/5, sin 2pi/5,
// sin 4pi/5}; with s14 = a1 + a4, d14 = a1 - a4, s23 = a2 + a3, d23 = a2 - a3:
// r1 = a0 + c0 s14 + c1 s23, r2 = a0 + c1 s14 + c0 s23,
// i1 = -+i (c2 d14 + c3 d23), i2 = -+i (c3 d14 - c2 d23);
// b0 = a0 + s14 + s23, b1 = (r1 + i1) w[0], b4 = (r1 - i1) w[3],
// b2 = (r2 + i2) w[1], b3 = (r2 - i2) w[2].
TEXT ·stage5AVX(SB), NOSPLIT, $0-56
	MOVQ         src+0(FP), SI
	MOVQ         stride+8(FP), R8
	MOVQ         dst+16(FP), DI
	MOVQ         n+24(FP), CX
	MOVQ         w+32(FP), AX
	MOVQ         mask+40(FP), BX
	MOVQ         c+48(FP), DX
	VMOVUPS      (BX), Y15
	VBROADCASTSS 0(DX), Y12
	VBROADCASTSS 4(DX), Y13
	VBROADCASTSS 8(DX), Y14
	VBROADCASTSS 12(DX), Y11
	LEAQ         (SI)(R8*1), R9
	LEAQ         (R9)(R8*1), R10
	LEAQ         (R10)(R8*1), R11
	LEAQ         (R11)(R8*1), R15
	MOVQ         CX, DX
	SHLQ         $3, DX
	LEAQ         (DI)(DX*1), R12
	LEAQ         (R12)(DX*1), R13
	LEAQ         (R13)(DX*1), R14
	LEAQ         (R14)(DX*1), DX
	XORQ         BX, BX
	SHRQ         $2, CX

loop5:
	VMOVUPS   (SI)(BX*1), Y0
	VMOVUPS   (R9)(BX*1), Y1
	VMOVUPS   (R10)(BX*1), Y2
	VMOVUPS   (R11)(BX*1), Y3
	VMOVUPS   (R15)(BX*1), Y4
	VADDPS    Y4, Y1, Y5
	VSUBPS    Y4, Y1, Y1
	VADDPS    Y3, Y2, Y6
	VSUBPS    Y3, Y2, Y2
	VADDPS    Y5, Y0, Y7
	VADDPS    Y6, Y7, Y7
	VMOVUPS   Y7, (DI)(BX*1)
	VMULPS    Y12, Y5, Y3
	VMULPS    Y13, Y6, Y4
	VADDPS    Y4, Y3, Y3
	VADDPS    Y0, Y3, Y3
	VMULPS    Y13, Y5, Y5
	VMULPS    Y12, Y6, Y6
	VADDPS    Y6, Y5, Y5
	VADDPS    Y0, Y5, Y5
	VMULPS    Y14, Y1, Y6
	VMULPS    Y11, Y2, Y7
	VADDPS    Y7, Y6, Y6
	VPERMILPS $0xB1, Y6, Y6
	VXORPS    Y15, Y6, Y6
	VMULPS    Y11, Y1, Y1
	VMULPS    Y14, Y2, Y2
	VSUBPS    Y2, Y1, Y1
	VPERMILPS $0xB1, Y1, Y1
	VXORPS    Y15, Y1, Y1
	VADDPS    Y6, Y3, Y0
	CMULW(0, Y0)
	VMOVUPS   Y0, (R12)(BX*1)
	VSUBPS    Y6, Y3, Y3
	CMULW(24, Y3)
	VMOVUPS   Y3, (DX)(BX*1)
	VADDPS    Y1, Y5, Y0
	CMULW(8, Y0)
	VMOVUPS   Y0, (R13)(BX*1)
	VSUBPS    Y1, Y5, Y5
	CMULW(16, Y5)
	VMOVUPS   Y5, (R14)(BX*1)
	ADDQ      $32, BX
	DECQ      CX
	JNZ       loop5
	VZEROUPPER
	RET

// func transposeAVX(dst *complex64, ds int, src *complex64, ss int, rows, cols int)
//
// dst[c*ds + r] = src[r*ss + c] for r < rows, c < cols (both multiples of
// 4, >= 4), strides in complex64 values, 4x4 blocks of 64-bit values at a
// time: VUNPCKLPD/VUNPCKHPD pair rows within 128-bit lanes, VPERM2F128
// joins the lanes.
TEXT ·transposeAVX(SB), NOSPLIT, $0-48
	MOVQ dst+0(FP), DI
	MOVQ ds+8(FP), R8
	MOVQ src+16(FP), SI
	MOVQ ss+24(FP), R9
	MOVQ rows+32(FP), R10
	MOVQ cols+40(FP), R11
	SHLQ $3, R8
	SHLQ $3, R9
	XORQ AX, AX

trow:
	CMPQ  AX, R10
	JGE   tdone
	MOVQ  AX, BX
	IMULQ R9, BX
	LEAQ  (SI)(BX*1), R12
	LEAQ  (R12)(R9*1), R13
	LEAQ  (R13)(R9*1), R14
	LEAQ  (R14)(R9*1), R15
	LEAQ  (DI)(AX*8), DX
	XORQ  CX, CX
	MOVQ  R11, BX

tcol:
	VMOVUPS    (R12)(CX*1), Y0
	VMOVUPS    (R13)(CX*1), Y1
	VMOVUPS    (R14)(CX*1), Y2
	VMOVUPS    (R15)(CX*1), Y3
	VUNPCKLPD  Y1, Y0, Y4
	VUNPCKHPD  Y1, Y0, Y5
	VUNPCKLPD  Y3, Y2, Y6
	VUNPCKHPD  Y3, Y2, Y7
	VPERM2F128 $0x20, Y6, Y4, Y0
	VPERM2F128 $0x20, Y7, Y5, Y1
	VPERM2F128 $0x31, Y6, Y4, Y2
	VPERM2F128 $0x31, Y7, Y5, Y3
	VMOVUPS    Y0, (DX)
	VMOVUPS    Y1, (DX)(R8*1)
	LEAQ       (DX)(R8*2), DX
	VMOVUPS    Y2, (DX)
	VMOVUPS    Y3, (DX)(R8*1)
	LEAQ       (DX)(R8*2), DX
	ADDQ       $32, CX
	SUBQ       $4, BX
	JNZ        tcol
	ADDQ       $4, AX
	JMP        trow

tdone:
	VZEROUPPER
	RET
