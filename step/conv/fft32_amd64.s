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

// func cmulAVX(b, k *complex64, n int)
//
// b[i] *= k[i] for i < n, n a multiple of 4 (>= 4).
TEXT ·cmulAVX(SB), NOSPLIT, $0-24
	MOVQ b+0(FP), DI
	MOVQ k+8(FP), SI
	MOVQ n+16(FP), CX
	XORQ BX, BX
	SHRQ $2, CX

loopm:
	VMOVUPS   (DI)(BX*1), Y0
	VMOVUPS   (SI)(BX*1), Y1
	VMOVSLDUP Y1, Y2
	VMOVSHDUP Y1, Y3
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
