//go:build amd64

#include "textflag.h"

// func combine6AVX2(dst *float32, n int, add bool, src *[6]*float32, c *[6]float32)
// dst[k] (= or +=) Σ_m src[m][k]·c[m] for k < n, n a multiple of 8.
TEXT ·combine6AVX2(SB), NOSPLIT, $0-40
	MOVQ         dst+0(FP), DI
	MOVQ         n+8(FP), CX
	MOVBLZX      add+16(FP), DX
	MOVQ         src+24(FP), SI
	MOVQ         c+32(FP), BX
	MOVQ         0(SI), R8
	MOVQ         8(SI), R9
	MOVQ         16(SI), R10
	MOVQ         24(SI), R11
	MOVQ         32(SI), R12
	MOVQ         40(SI), R13
	VBROADCASTSS 0(BX), Y8
	VBROADCASTSS 4(BX), Y9
	VBROADCASTSS 8(BX), Y10
	VBROADCASTSS 12(BX), Y11
	VBROADCASTSS 16(BX), Y12
	VBROADCASTSS 20(BX), Y13
	XORQ         AX, AX
	SHRQ         $3, CX
	JZ           combinedone

combineloop:
	VMULPS      (R8)(AX*4), Y8, Y0
	VFMADD231PS (R9)(AX*4), Y9, Y0
	VFMADD231PS (R10)(AX*4), Y10, Y0
	VFMADD231PS (R11)(AX*4), Y11, Y0
	VFMADD231PS (R12)(AX*4), Y12, Y0
	VFMADD231PS (R13)(AX*4), Y13, Y0
	TESTQ       DX, DX
	JZ          combinestore
	VADDPS      (DI)(AX*4), Y0, Y0

combinestore:
	VMOVUPS Y0, (DI)(AX*4)
	ADDQ    $8, AX
	DECQ    CX
	JNZ     combineloop

combinedone:
	VZEROUPPER
	RET

// func taps6AddAVX2(out *float64, even, odd *float32, n int, a, b *[3]float64)
// out[i] += Σ_j a[j]·even[i+j] + b[j]·odd[i+j], j < 3, for i < n, n a multiple of 4.
TEXT ·taps6AddAVX2(SB), NOSPLIT, $0-48
	MOVQ         out+0(FP), DI
	MOVQ         even+8(FP), SI
	MOVQ         odd+16(FP), DX
	MOVQ         n+24(FP), CX
	MOVQ         a+32(FP), BX
	MOVQ         b+40(FP), R8
	VBROADCASTSD 0(BX), Y8
	VBROADCASTSD 8(BX), Y9
	VBROADCASTSD 16(BX), Y10
	VBROADCASTSD 0(R8), Y11
	VBROADCASTSD 8(R8), Y12
	VBROADCASTSD 16(R8), Y13
	XORQ         AX, AX
	SHRQ         $2, CX
	JZ           tapsdone

tapsloop:
	VMOVUPD     (DI)(AX*8), Y0
	VCVTPS2PD   (SI)(AX*4), Y1
	VCVTPS2PD   4(SI)(AX*4), Y2
	VCVTPS2PD   8(SI)(AX*4), Y3
	VCVTPS2PD   (DX)(AX*4), Y4
	VCVTPS2PD   4(DX)(AX*4), Y5
	VCVTPS2PD   8(DX)(AX*4), Y6
	VFMADD231PD Y1, Y8, Y0
	VFMADD231PD Y2, Y9, Y0
	VFMADD231PD Y3, Y10, Y0
	VFMADD231PD Y4, Y11, Y0
	VFMADD231PD Y5, Y12, Y0
	VFMADD231PD Y6, Y13, Y0
	VMOVUPD     Y0, (DI)(AX*8)
	ADDQ        $4, AX
	DECQ        CX
	JNZ         tapsloop

tapsdone:
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
