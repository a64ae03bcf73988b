//go:build amd64

#include "textflag.h"

// func blend4AVX2(dst, f0, f1, t0, t1 *float32, n int, a0, a1, b0, b1 float32)
// dst[k] = a0·f0[k] + a1·f1[k] + b0·t0[k] + b1·t1[k] for k < n, n a multiple of 8.
TEXT ·blend4AVX2(SB), NOSPLIT, $0-64
	MOVQ dst+0(FP), DI
	MOVQ f0+8(FP), R8
	MOVQ f1+16(FP), R9
	MOVQ t0+24(FP), R10
	MOVQ t1+32(FP), R11
	MOVQ n+40(FP), CX
	VBROADCASTSS a0+48(FP), Y4
	VBROADCASTSS a1+52(FP), Y5
	VBROADCASTSS b0+56(FP), Y6
	VBROADCASTSS b1+60(FP), Y7
	XORQ AX, AX
	SHRQ $3, CX
	JZ   blenddone

blendloop:
	VMULPS      (R8)(AX*4), Y4, Y0
	VFMADD231PS (R9)(AX*4), Y5, Y0
	VFMADD231PS (R10)(AX*4), Y6, Y0
	VFMADD231PS (R11)(AX*4), Y7, Y0
	VMOVUPS     Y0, (DI)(AX*4)
	ADDQ        $8, AX
	DECQ        CX
	JNZ         blendloop

blenddone:
	VZEROUPPER
	RET

// func lerpAddAVX2(out *float64, src *float32, n int, wl, wr float64)
// out[i] += wl·src[i] + wr·src[i+1] for i < n, n a multiple of 4.
TEXT ·lerpAddAVX2(SB), NOSPLIT, $0-40
	MOVQ out+0(FP), DI
	MOVQ src+8(FP), SI
	MOVQ n+16(FP), CX
	VBROADCASTSD wl+24(FP), Y4
	VBROADCASTSD wr+32(FP), Y5
	XORQ AX, AX
	SHRQ $2, CX
	JZ   lerpdone

lerploop:
	VCVTPS2PD   (SI)(AX*4), Y0
	VCVTPS2PD   4(SI)(AX*4), Y1
	VMOVUPD     (DI)(AX*8), Y2
	VFMADD231PD Y0, Y4, Y2
	VFMADD231PD Y1, Y5, Y2
	VMOVUPD     Y2, (DI)(AX*8)
	ADDQ        $4, AX
	DECQ        CX
	JNZ         lerploop

lerpdone:
	VZEROUPPER
	RET

// func waves6AVX2(row *float64, n int, add bool, base float64, x *[6]*float64, c *[6]float64)
// row[i] (= or +=) base + Σ_j x[j][i]·c[j] for i < n, n a multiple of 4.
TEXT ·waves6AVX2(SB), NOSPLIT, $0-48
	MOVQ         row+0(FP), DI
	MOVQ         n+8(FP), CX
	MOVBLZX      add+16(FP), DX
	VBROADCASTSD base+24(FP), Y15
	MOVQ         x+32(FP), SI
	MOVQ         c+40(FP), BX
	MOVQ         0(SI), R8
	MOVQ         8(SI), R9
	MOVQ         16(SI), R10
	MOVQ         24(SI), R11
	MOVQ         32(SI), R12
	MOVQ         40(SI), R13
	VBROADCASTSD 0(BX), Y8
	VBROADCASTSD 8(BX), Y9
	VBROADCASTSD 16(BX), Y10
	VBROADCASTSD 24(BX), Y11
	VBROADCASTSD 32(BX), Y12
	VBROADCASTSD 40(BX), Y13
	XORQ         AX, AX
	SHRQ         $2, CX
	JZ           wavesdone

wavesloop:
	VMOVAPD     Y15, Y0
	VFMADD231PD (R8)(AX*8), Y8, Y0
	VFMADD231PD (R9)(AX*8), Y9, Y0
	VFMADD231PD (R10)(AX*8), Y10, Y0
	VFMADD231PD (R11)(AX*8), Y11, Y0
	VFMADD231PD (R12)(AX*8), Y12, Y0
	VFMADD231PD (R13)(AX*8), Y13, Y0
	TESTQ       DX, DX
	JZ          wavesstore
	VADDPD      (DI)(AX*8), Y0, Y0

wavesstore:
	VMOVUPD Y0, (DI)(AX*8)
	ADDQ    $4, AX
	DECQ    CX
	JNZ     wavesloop

wavesdone:
	VZEROUPPER
	RET
