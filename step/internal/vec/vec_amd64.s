// AVX2 + FMA kernels of package vec (Go assembler syntax: operands are in
// source-first order, https://go.dev/doc/asm; instruction semantics: Intel 64
// and IA-32 Architectures Software Developer's Manual, vol. 2).

#include "textflag.h"

// VCMPPS predicates (Intel SDM vol. 2, CMPPS/VCMPPS, table of imm8 values).
#define CMP_NEQ_UQ $4
#define CMP_GT_OQ $0x1e

// func corrAsm(dst, src []float32, offs []int, k []float32, kw int, add bool)
//
// dst[i] (+)= sum_r sum_c k[r*kw+c] * src[offs[r]+i+c], one fused
// multiply-add per term in (r, c) order, 64, 32, then 8 lanes at a time
// with the sums in registers (8 independent accumulator chains cover the
// FMA latency), the last len(dst) mod 8 elements one by one.
TEXT ·corrAsm(SB), NOSPLIT, $0-105
	MOVQ dst_base+0(FP), DI
	MOVQ dst_len+8(FP), CX
	MOVQ src_base+24(FP), SI
	MOVQ offs_base+48(FP), R8
	MOVQ offs_len+56(FP), R9
	MOVQ k_base+72(FP), R10
	MOVQ kw+96(FP), R11
	MOVBQZX add+104(FP), R12
	XORQ BX, BX

loop64:
	LEAQ 64(BX), AX
	CMPQ AX, CX
	JGT  loop32
	VXORPS Y0, Y0, Y0
	VXORPS Y1, Y1, Y1
	VXORPS Y2, Y2, Y2
	VXORPS Y3, Y3, Y3
	VXORPS Y5, Y5, Y5
	VXORPS Y6, Y6, Y6
	VXORPS Y7, Y7, Y7
	VXORPS Y8, Y8, Y8
	MOVQ   R10, DX
	XORQ   R13, R13

row64:
	MOVQ (R8)(R13*8), AX
	ADDQ BX, AX
	LEAQ (SI)(AX*4), AX
	MOVQ R11, R14

tap64:
	VBROADCASTSS (DX), Y4
	VFMADD231PS  (AX), Y4, Y0
	VFMADD231PS  32(AX), Y4, Y1
	VFMADD231PS  64(AX), Y4, Y2
	VFMADD231PS  96(AX), Y4, Y3
	VFMADD231PS  128(AX), Y4, Y5
	VFMADD231PS  160(AX), Y4, Y6
	VFMADD231PS  192(AX), Y4, Y7
	VFMADD231PS  224(AX), Y4, Y8
	ADDQ         $4, AX
	ADDQ         $4, DX
	DECQ         R14
	JNZ          tap64
	INCQ         R13
	CMPQ         R13, R9
	JLT          row64

	LEAQ  (DI)(BX*4), AX
	TESTQ R12, R12
	JZ    store64
	VADDPS (AX), Y0, Y0
	VADDPS 32(AX), Y1, Y1
	VADDPS 64(AX), Y2, Y2
	VADDPS 96(AX), Y3, Y3
	VADDPS 128(AX), Y5, Y5
	VADDPS 160(AX), Y6, Y6
	VADDPS 192(AX), Y7, Y7
	VADDPS 224(AX), Y8, Y8

store64:
	VMOVUPS Y0, (AX)
	VMOVUPS Y1, 32(AX)
	VMOVUPS Y2, 64(AX)
	VMOVUPS Y3, 96(AX)
	VMOVUPS Y5, 128(AX)
	VMOVUPS Y6, 160(AX)
	VMOVUPS Y7, 192(AX)
	VMOVUPS Y8, 224(AX)
	ADDQ    $64, BX
	JMP     loop64

loop32:
	LEAQ 32(BX), AX
	CMPQ AX, CX
	JGT  loop8
	VXORPS Y0, Y0, Y0
	VXORPS Y1, Y1, Y1
	VXORPS Y2, Y2, Y2
	VXORPS Y3, Y3, Y3
	MOVQ R10, DX
	XORQ R13, R13

row32:
	MOVQ (R8)(R13*8), AX
	ADDQ BX, AX
	LEAQ (SI)(AX*4), AX
	MOVQ R11, R14

tap32:
	VBROADCASTSS (DX), Y4
	VFMADD231PS  (AX), Y4, Y0
	VFMADD231PS  32(AX), Y4, Y1
	VFMADD231PS  64(AX), Y4, Y2
	VFMADD231PS  96(AX), Y4, Y3
	ADDQ         $4, AX
	ADDQ         $4, DX
	DECQ         R14
	JNZ          tap32
	INCQ         R13
	CMPQ         R13, R9
	JLT          row32

	LEAQ  (DI)(BX*4), AX
	TESTQ R12, R12
	JZ    store32
	VADDPS (AX), Y0, Y0
	VADDPS 32(AX), Y1, Y1
	VADDPS 64(AX), Y2, Y2
	VADDPS 96(AX), Y3, Y3

store32:
	VMOVUPS Y0, (AX)
	VMOVUPS Y1, 32(AX)
	VMOVUPS Y2, 64(AX)
	VMOVUPS Y3, 96(AX)
	ADDQ    $32, BX
	JMP     loop32

loop8:
	LEAQ 8(BX), AX
	CMPQ AX, CX
	JGT  loop1
	VXORPS Y0, Y0, Y0
	MOVQ   R10, DX
	XORQ   R13, R13

row8:
	MOVQ (R8)(R13*8), AX
	ADDQ BX, AX
	LEAQ (SI)(AX*4), AX
	MOVQ R11, R14

tap8:
	VBROADCASTSS (DX), Y4
	VFMADD231PS  (AX), Y4, Y0
	ADDQ         $4, AX
	ADDQ         $4, DX
	DECQ         R14
	JNZ          tap8
	INCQ         R13
	CMPQ         R13, R9
	JLT          row8

	LEAQ  (DI)(BX*4), AX
	TESTQ R12, R12
	JZ    store8
	VADDPS (AX), Y0, Y0

store8:
	VMOVUPS Y0, (AX)
	ADDQ    $8, BX
	JMP     loop8

loop1:
	CMPQ BX, CX
	JGE  done
	VXORPS X0, X0, X0
	MOVQ   R10, DX
	XORQ   R13, R13

row1:
	MOVQ (R8)(R13*8), AX
	ADDQ BX, AX
	LEAQ (SI)(AX*4), AX
	MOVQ R11, R14

tap1:
	VMOVSS      (DX), X4
	VFMADD231SS (AX), X4, X0
	ADDQ        $4, AX
	ADDQ        $4, DX
	DECQ        R14
	JNZ         tap1
	INCQ        R13
	CMPQ        R13, R9
	JLT         row1

	LEAQ  (DI)(BX*4), AX
	TESTQ R12, R12
	JZ    store1
	VADDSS (AX), X0, X0

store1:
	VMOVSS X0, (AX)
	INCQ   BX
	JMP    loop1

done:
	VZEROUPPER
	RET

// func ratioAsm(q, hf, d, m []float32, b float32)
//
// q = (d / (hf + b)) where (hf + b > 0) and (m != 0), else +0: VCMPPS
// gives all-ones lanes where the test holds, VANDPS keeps the quotient
// there. Same IEEE operations in the same order as the Go loop.
TEXT ·ratioAsm(SB), NOSPLIT, $0-100
	MOVQ         q_base+0(FP), DI
	MOVQ         q_len+8(FP), CX
	MOVQ         hf_base+24(FP), SI
	MOVQ         d_base+48(FP), DX
	MOVQ         m_base+72(FP), R8
	VBROADCASTSS b+96(FP), Y7
	VXORPS       Y6, Y6, Y6
	XORQ         BX, BX

ratioLoop:
	CMPQ    BX, CX
	JGE     ratioDone
	VMOVUPS (SI)(BX*4), Y0
	VADDPS  Y7, Y0, Y0
	VMOVUPS (R8)(BX*4), Y1
	VCMPPS  CMP_NEQ_UQ, Y6, Y1, Y1
	VCMPPS  CMP_GT_OQ, Y6, Y0, Y2
	VANDPS  Y1, Y2, Y2
	VMOVUPS (DX)(BX*4), Y3
	VDIVPS  Y0, Y3, Y3
	VANDPS  Y2, Y3, Y3
	VMOVUPS Y3, (DI)(BX*4)
	ADDQ    $8, BX
	JMP     ratioLoop

ratioDone:
	VZEROUPPER
	RET

// func updateAsm(e, f, t, s []float32, floor float32)
//
// e = (f * t) / s where s > floor, else f (VBLENDVPS on the comparison
// mask).
TEXT ·updateAsm(SB), NOSPLIT, $0-100
	MOVQ         e_base+0(FP), DI
	MOVQ         e_len+8(FP), CX
	MOVQ         f_base+24(FP), SI
	MOVQ         t_base+48(FP), DX
	MOVQ         s_base+72(FP), R8
	VBROADCASTSS floor+96(FP), Y7
	XORQ         BX, BX

updateLoop:
	CMPQ      BX, CX
	JGE       updateDone
	VMOVUPS   (SI)(BX*4), Y0
	VMOVUPS   (R8)(BX*4), Y2
	VMULPS    (DX)(BX*4), Y0, Y1
	VDIVPS    Y2, Y1, Y1
	VCMPPS    CMP_GT_OQ, Y7, Y2, Y3
	VBLENDVPS Y3, Y1, Y0, Y4
	VMOVUPS   Y4, (DI)(BX*4)
	ADDQ      $8, BX
	JMP       updateLoop

updateDone:
	VZEROUPPER
	RET

// func ratioJVPAsm(q, dq, hf, d, m, delta, hu []float32, b float32)
//
// den = hf + b; where den > 0 and m != 0: q = d / den and
// dq = (delta - q*hu) / den (product rounded before the subtraction, as in
// the Go loop); elsewhere both +0.
TEXT ·ratioJVPAsm(SB), NOSPLIT, $0-172
	MOVQ         q_base+0(FP), DI
	MOVQ         q_len+8(FP), CX
	MOVQ         dq_base+24(FP), R9
	MOVQ         hf_base+48(FP), SI
	MOVQ         d_base+72(FP), DX
	MOVQ         m_base+96(FP), R8
	MOVQ         delta_base+120(FP), R10
	MOVQ         hu_base+144(FP), R11
	VBROADCASTSS b+168(FP), Y7
	VXORPS       Y6, Y6, Y6
	XORQ         BX, BX

ratioJVPLoop:
	CMPQ    BX, CX
	JGE     ratioJVPDone
	VMOVUPS (SI)(BX*4), Y0
	VADDPS  Y7, Y0, Y0
	VMOVUPS (R8)(BX*4), Y1
	VCMPPS  CMP_NEQ_UQ, Y6, Y1, Y1
	VCMPPS  CMP_GT_OQ, Y6, Y0, Y2
	VANDPS  Y1, Y2, Y2
	VMOVUPS (DX)(BX*4), Y3
	VDIVPS  Y0, Y3, Y3
	VMULPS  (R11)(BX*4), Y3, Y4
	VMOVUPS (R10)(BX*4), Y5
	VSUBPS  Y4, Y5, Y5
	VDIVPS  Y0, Y5, Y5
	VANDPS  Y2, Y3, Y3
	VANDPS  Y2, Y5, Y5
	VMOVUPS Y3, (DI)(BX*4)
	VMOVUPS Y5, (R9)(BX*4)
	ADDQ    $8, BX
	JMP     ratioJVPLoop

ratioJVPDone:
	VZEROUPPER
	RET

// func updateJVPAsm(e, ue, f, u, t, dt, s []float32, floor float32)
//
// Where s > floor: e = (f*t)/s and ue = (u*t + f*dt)/s (each product
// rounded, then the sum, as in the Go loop); elsewhere e = f, ue = u.
TEXT ·updateJVPAsm(SB), NOSPLIT, $0-172
	MOVQ         e_base+0(FP), DI
	MOVQ         e_len+8(FP), CX
	MOVQ         ue_base+24(FP), R9
	MOVQ         f_base+48(FP), SI
	MOVQ         u_base+72(FP), R10
	MOVQ         t_base+96(FP), DX
	MOVQ         dt_base+120(FP), R11
	MOVQ         s_base+144(FP), R8
	VBROADCASTSS floor+168(FP), Y7
	XORQ         BX, BX

updateJVPLoop:
	CMPQ      BX, CX
	JGE       updateJVPDone
	VMOVUPS   (SI)(BX*4), Y0
	VMOVUPS   (R10)(BX*4), Y1
	VMOVUPS   (DX)(BX*4), Y2
	VMOVUPS   (R8)(BX*4), Y3
	VCMPPS    CMP_GT_OQ, Y7, Y3, Y4
	VMULPS    Y2, Y0, Y5
	VDIVPS    Y3, Y5, Y5
	VBLENDVPS Y4, Y5, Y0, Y5
	VMOVUPS   Y5, (DI)(BX*4)
	VMULPS    Y2, Y1, Y2
	VMULPS    (R11)(BX*4), Y0, Y6
	VADDPS    Y6, Y2, Y2
	VDIVPS    Y3, Y2, Y2
	VBLENDVPS Y4, Y2, Y1, Y2
	VMOVUPS   Y2, (R9)(BX*4)
	ADDQ      $8, BX
	JMP       updateJVPLoop

updateJVPDone:
	VZEROUPPER
	RET

// func l1SumsAsm(dl, nl *[8]float64, a, b []float32)
//
// Lanes 0-3 in Y0 (diff) / Y2 (norm), 4-7 in Y1 / Y3: the float32
// difference is widened exactly (VCVTPS2PD), its sign cleared with the
// mask 0x7fff...f (all ones shifted right by one), then added.
TEXT ·l1SumsAsm(SB), NOSPLIT, $0-64
	MOVQ    dl+0(FP), DI
	MOVQ    nl+8(FP), R9
	MOVQ    a_base+16(FP), SI
	MOVQ    a_len+24(FP), CX
	MOVQ    b_base+40(FP), DX
	VMOVUPD (DI), Y0
	VMOVUPD 32(DI), Y1
	VMOVUPD (R9), Y2
	VMOVUPD 32(R9), Y3
	VPCMPEQQ Y15, Y15, Y15
	VPSRLQ  $1, Y15, Y15
	XORQ    BX, BX

l1Loop:
	CMPQ      BX, CX
	JGE       l1Done
	VMOVUPS   (DX)(BX*4), Y4
	VMOVUPS   (SI)(BX*4), Y5
	VSUBPS    Y4, Y5, Y5
	VCVTPS2PD X5, Y6
	VEXTRACTF128 $1, Y5, X5
	VCVTPS2PD X5, Y7
	VANDPD    Y15, Y6, Y6
	VANDPD    Y15, Y7, Y7
	VADDPD    Y6, Y0, Y0
	VADDPD    Y7, Y1, Y1
	VCVTPS2PD X4, Y8
	VEXTRACTF128 $1, Y4, X4
	VCVTPS2PD X4, Y9
	VANDPD    Y15, Y8, Y8
	VANDPD    Y15, Y9, Y9
	VADDPD    Y8, Y2, Y2
	VADDPD    Y9, Y3, Y3
	ADDQ      $8, BX
	JMP       l1Loop

l1Done:
	VMOVUPD Y0, (DI)
	VMOVUPD Y1, 32(DI)
	VMOVUPD Y2, (R9)
	VMOVUPD Y3, 32(R9)
	VZEROUPPER
	RET
