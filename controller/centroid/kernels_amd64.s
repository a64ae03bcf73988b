//go:build amd64

#include "textflag.h"

// func windows8AVX2(frame *uint16, base int, stride uintptr, idx *int32, n int, par *params8,
//	cal *float32, start *int32, ref *float32, slopes *float32, flags *[4]int)
//
// One pass per window, in the order of kernel.go: the eight raw rows are
// widened, calibrated (a product then a subtraction, no FMA, so that the
// pure-Go kernel gives the same bits) and kept in Y0–Y7 while the peak, the
// largest raw value and the dead rows are found; the threshold and the
// moment sums then run on the registers.
//
// Registers: DI frame pixel 0 (frame − 2·base); BX row stride in bytes; R14
// 3·stride; SI next entry of idx; CX windows left; R8 par; R9 cal; R10
// start; R11 ref; R12 slopes; AX window index i; DX row pointer, then
// scratch; R13 the window's 512-byte calibration block, then scratch.
// Y8 peak; Y9 largest raw value; Y10 column sums S; Y11 column sums Y;
// Y12 threshold; Y13 clip floor; Y14, Y15 scratch.
//
// Stack: 0–255 the calibrated window (hot-pixel test only); 256, 264, 272,
// 280 the counters saturated, dark, dead rows, hot; 288 a spill of CX.

// P1ROW widens and calibrates one raw row at mem into v; g is the byte
// offset of its gains in the block (offsets follow at g+32).
#define P1ROW(mem, g, v) \
	VPMOVZXWD mem, Y14 \
	VPTEST Y14, Y14 \
	JNZ 2(PC) \
	INCQ 272(SP) \
	VPMAXSD Y14, Y9, Y9 \
	VCVTDQ2PS Y14, v \
	VMULPS g(R13), v, v \
	VSUBPS g+32(R13), v, v \
	VMAXPS v, Y8, Y8

// P2COG clips row v at the threshold and adds it to the column sums; yo is
// the offset of ys[y] in par.
#define P2COG(v, yo) \
	VSUBPS Y12, v, v \
	VMAXPS Y13, v, v \
	VADDPS v, Y10, Y10 \
	VMULPS yo(R8), v, v \
	VADDPS v, Y11, Y11

// P2WCOG is P2COG with the window weight row at wo applied after the clip.
#define P2WCOG(v, wo, yo) \
	VSUBPS Y12, v, v \
	VMAXPS Y13, v, v \
	VMULPS wo(R8), v, v \
	VADDPS v, Y10, Y10 \
	VMULPS yo(R8), v, v \
	VADDPS v, Y11, Y11

// HSUM folds the 8 lanes of y in halves into lane 0 of x (the low half of
// y), in fold's order; t is scratch.
#define HSUM(y, x, t) \
	VEXTRACTF128 $1, y, t \
	VADDPS t, x, x \
	VPERMILPS $0x4e, x, t \
	VADDPS t, x, x \
	VPERMILPS $0xb1, x, t \
	VADDSS t, x, x

// PEAKROW jumps to hotfound with R13 = 8·y and DX the lanes of row v equal
// to the peak, if any.
#define PEAKROW(v, y8) \
	MOVQ $y8, R13 \
	VCMPPS $0, Y8, v, Y15 \
	VMOVMSKPS Y15, DX \
	TESTL DX, DX \
	JNZ hotfound

TEXT ·windows8AVX2(SB), NOSPLIT, $296-88
	MOVQ frame+0(FP), DI
	MOVQ base+8(FP), AX
	SHLQ $1, AX
	SUBQ AX, DI
	MOVQ stride+16(FP), BX
	LEAQ (BX)(BX*2), R14
	MOVQ idx+24(FP), SI
	MOVQ n+32(FP), CX
	MOVQ par+40(FP), R8
	MOVQ cal+48(FP), R9
	MOVQ start+56(FP), R10
	MOVQ ref+64(FP), R11
	MOVQ slopes+72(FP), R12
	MOVQ $0, 256(SP)
	MOVQ $0, 264(SP)
	MOVQ $0, 272(SP)
	MOVQ $0, 280(SP)
	TESTQ CX, CX
	JZ   done

window:
	MOVLQSX (SI), AX
	MOVLQSX (R10)(AX*4), DX
	LEAQ (DI)(DX*2), DX
	MOVQ AX, R13
	SHLQ $9, R13
	ADDQ R9, R13
	VXORPS Y8, Y8, Y8
	VPXOR Y9, Y9, Y9
	P1ROW((DX), 0, Y0)
	P1ROW((DX)(BX*1), 64, Y1)
	P1ROW((DX)(BX*2), 128, Y2)
	P1ROW((DX)(R14*1), 192, Y3)
	LEAQ (DX)(BX*4), DX
	P1ROW((DX), 256, Y4)
	P1ROW((DX)(BX*1), 320, Y5)
	P1ROW((DX)(BX*2), 384, Y6)
	P1ROW((DX)(R14*1), 448, Y7)

	// Saturated: a raw value above saturation − 1.
	VPCMPGTD 544(R8), Y9, Y14
	VPTEST Y14, Y14
	JZ   2(PC)
	INCQ 256(SP)

	// The peak into every lane of Y8 (max is exact: any order gives it).
	VPERM2F128 $1, Y8, Y8, Y15
	VMAXPS Y15, Y8, Y8
	VPERMILPS $0x4e, Y8, Y15
	VMAXPS Y15, Y8, Y8
	VPERMILPS $0xb1, Y8, Y15
	VMAXPS Y15, Y8, Y8

	// Hot pixel: only with HotRatio set and a positive peak.
	CMPL 644(R8), $0
	JEQ  threshold
	VXORPS Y14, Y14, Y14
	VCMPPS $0x0e, Y14, Y8, Y15
	VMOVMSKPS Y15, DX
	TESTL DX, DX
	JZ   threshold
	VMOVUPS Y0, 0(SP)
	VMOVUPS Y1, 32(SP)
	VMOVUPS Y2, 64(SP)
	VMOVUPS Y3, 96(SP)
	VMOVUPS Y4, 128(SP)
	VMOVUPS Y5, 160(SP)
	VMOVUPS Y6, 192(SP)
	VMOVUPS Y7, 224(SP)
	PEAKROW(Y0, 0)
	PEAKROW(Y1, 8)
	PEAKROW(Y2, 16)
	PEAKROW(Y3, 24)
	PEAKROW(Y4, 32)
	PEAKROW(Y5, 40)
	PEAKROW(Y6, 48)
	PEAKROW(Y7, 56)

hotfound:
	// k = R13 + x, the first pixel at the peak; n = the largest of its
	// neighbours (0 to start with); hot if peak > HotRatio·n.
	BSFL DX, DX
	MOVQ CX, 288(SP)
	LEAQ (R13)(DX*1), CX
	LEAQ (SP)(CX*4), CX
	VXORPS X14, X14, X14
	TESTQ DX, DX
	JZ   2(PC)
	VMAXSS -4(CX), X14, X14
	CMPQ DX, $7
	JEQ  2(PC)
	VMAXSS 4(CX), X14, X14
	TESTQ R13, R13
	JZ   2(PC)
	VMAXSS -32(CX), X14, X14
	CMPQ R13, $56
	JEQ  2(PC)
	VMAXSS 32(CX), X14, X14
	MOVQ 288(SP), CX
	VMULSS 640(R8), X14, X14
	VCMPSS $0x0e, X14, X8, X15
	VMOVMSKPS X15, DX
	TESTL $1, DX
	JZ   2(PC)
	INCQ 280(SP)

threshold:
	// thr = Threshold·peak; clipping (thr > 0) subtracts thr and floors at
	// 0, otherwise subtracts 0 and floors at −∞, which leaves v as it is.
	VMULPS 576(R8), Y8, Y12
	VXORPS Y14, Y14, Y14
	VCMPPS $0x0e, Y14, Y12, Y15
	VANDPS Y15, Y12, Y12
	VANDNPS 608(R8), Y15, Y13
	VXORPS Y10, Y10, Y10
	VXORPS Y11, Y11, Y11
	CMPL 648(R8), $0
	JNE  wcog
	P2COG(Y0, 32)
	P2COG(Y1, 64)
	P2COG(Y2, 96)
	P2COG(Y3, 128)
	P2COG(Y4, 160)
	P2COG(Y5, 192)
	P2COG(Y6, 224)
	P2COG(Y7, 256)
	JMP  sums

wcog:
	P2WCOG(Y0, 288, 32)
	P2WCOG(Y1, 320, 64)
	P2WCOG(Y2, 352, 96)
	P2WCOG(Y3, 384, 128)
	P2WCOG(Y4, 416, 160)
	P2WCOG(Y5, 448, 192)
	P2WCOG(Y6, 480, 224)
	P2WCOG(Y7, 512, 256)

sums:
	VMULPS 0(R8), Y10, Y15
	HSUM(Y10, X10, X14)
	HSUM(Y15, X15, X14)
	HSUM(Y11, X11, X14)
	VXORPS X14, X14, X14
	VCMPSS $0x0e, X14, X10, X13
	VMOVMSKPS X13, DX
	TESTL $1, DX
	JZ   dark
	VDIVSS X10, X15, X15
	VDIVSS X10, X11, X11
	VSUBSS (R11)(AX*8), X15, X15
	VSUBSS 4(R11)(AX*8), X11, X11
	VMOVSS X15, (R12)(AX*8)
	VMOVSS X11, 4(R12)(AX*8)
	JMP  next

dark:
	INCQ 264(SP)
	MOVQ $0, (R12)(AX*8)

next:
	ADDQ $4, SI
	DECQ CX
	JNZ  window

done:
	MOVQ flags+80(FP), DX
	MOVQ 256(SP), AX
	MOVQ AX, 0(DX)
	MOVQ 264(SP), AX
	MOVQ AX, 8(DX)
	MOVQ 272(SP), AX
	MOVQ AX, 16(DX)
	MOVQ 280(SP), AX
	MOVQ AX, 24(DX)
	VZEROUPPER
	RET
