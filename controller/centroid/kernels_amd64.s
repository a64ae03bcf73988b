//go:build amd64

#include "textflag.h"

// func windows8AVX2(frame *uint16, base int, stride uintptr, idx *int32, n int, par *params8,
//	cal *float32, start *int32, ref *float32, slopes *float32, flags *[4]int)
//
// One pass per window, in the order of kernel.go: the eight raw rows are
// widened, calibrated (one fused multiply–subtract) and kept in Y0–Y7 while the peak, the
// largest raw value and the dead rows are found; the threshold and the
// moment sums then run on the registers.
//
// Registers: DI frame pixel 0 (frame − 2·base); BX row stride in bytes; R14
// 3·stride; SI next entry of idx; CX windows left; R8 par; R9 cal; R10
// start; R11 ref; R12 slopes; AX window index i; DX row pointer, then
// scratch; R13 the window's 512-byte calibration block, then scratch.
// Y8 peak; Y9 largest raw value; Y10 smallest raw value, then the column
// sums S; Y11 the column moments D; Y12 threshold; Y13 clip floor; Y14, Y15
// scratch.
//
// Stack: 0–479 the calibrated window for the hot-pixel test, ten rows of 12
// floats (48 bytes): row y at 48·(y+1), its pixels in the first 8 floats; the
// rows −1 and 8 and the last 4 floats of every row stay 0 from the start
// (zeroed when HotRatio is set), so the four neighbours of any pixel can be read without a test at the edges
// (an outside neighbour reads 0, which is where the largest one starts).
// 480, 488, 496, 504: the counters saturated, dark, dead rows, hot.

// P1ROW widens and calibrates one raw row at mem into v; g is the byte
// offset of its gains in the block (offsets follow at g+32). The peak is
// taken after the eight rows, in a tree (a shorter chain than row by row).
#define P1ROW(mem, g, v) \
	VPMOVZXWD mem, Y14 \
	VPMINUD Y14, Y10, Y10 \
	VPMAXSD Y14, Y9, Y9 \
	VCVTDQ2PS Y14, v \
	VMOVUPS g(R13), Y15 \
	VFMSUB213PS g+32(R13), Y15, v

// CLIP applies the threshold to row v.
#define CLIP(v) \
	VSUBPS Y12, v, v \
	VMAXPS Y13, v, v

// DEADROW counts a row as dead if its 16 bytes, at lo and hi = lo+8, are
// all zero.
#define DEADROW(lo, hi) \
	MOVQ lo, R13 \
	ORQ  hi, R13 \
	JNZ  2(PC) \
	INCQ 496(SP)

// PAIR sets a = a + b (the row sum) and b = ys·(a − b) (the row moment,
// ys at yo in par), for rows y and 7−y.
#define PAIR(a, b, yo) \
	VSUBPS b, a, Y14 \
	VADDPS b, a, a \
	VMULPS yo(R8), Y14, b

// PEAKMASK shifts the peak mask in R13 up by a row and adds row v's lanes
// equal to the peak.
#define PEAKMASK(v) \
	SHLQ $8, R13 \
	VCMPPS $0, Y8, v, Y15 \
	VMOVMSKPS Y15, DX \
	ORQ  DX, R13

TEXT ·windows8AVX2(SB), NOSPLIT, $512-88
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
	MOVQ $0, 480(SP)
	MOVQ $0, 488(SP)
	MOVQ $0, 496(SP)
	MOVQ $0, 504(SP)
	CMPL 644(R8), $0
	JEQ  zeroed
	VXORPS Y15, Y15, Y15
	VMOVUPS Y15, 0(SP)
	VMOVUPS Y15, 32(SP)
	VMOVUPS Y15, 64(SP)
	VMOVUPS Y15, 96(SP)
	VMOVUPS Y15, 128(SP)
	VMOVUPS Y15, 160(SP)
	VMOVUPS Y15, 192(SP)
	VMOVUPS Y15, 224(SP)
	VMOVUPS Y15, 256(SP)
	VMOVUPS Y15, 288(SP)
	VMOVUPS Y15, 320(SP)
	VMOVUPS Y15, 352(SP)
	VMOVUPS Y15, 384(SP)
	VMOVUPS Y15, 416(SP)
	VMOVUPS Y15, 448(SP)

zeroed:
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
	VPCMPEQD Y10, Y10, Y10
	P1ROW((DX), 0, Y0)
	P1ROW((DX)(BX*1), 64, Y1)
	P1ROW((DX)(BX*2), 128, Y2)
	P1ROW((DX)(R14*1), 192, Y3)
	LEAQ (DX)(BX*4), DX
	P1ROW((DX), 256, Y4)
	P1ROW((DX)(BX*1), 320, Y5)
	P1ROW((DX)(BX*2), 384, Y6)
	P1ROW((DX)(R14*1), 448, Y7)

	// A raw 0 somewhere: count the rows that are 0 throughout (rare, so out
	// of line).
	VPXOR Y14, Y14, Y14
	VPCMPEQD Y14, Y10, Y14
	VPTEST Y14, Y14
	JNZ  deadrows

saturation:
	// Saturated: a raw value above saturation − 1.
	VPCMPGTD 544(R8), Y9, Y14
	VPTEST Y14, Y14
	JZ   2(PC)
	INCQ 480(SP)

	// The peak into every lane of Y8 (max is exact: any order gives it):
	// max(0, rows) in a tree, then across the lanes.
	VMAXPS Y0, Y8, Y8
	VMAXPS Y1, Y2, Y15
	VMAXPS Y3, Y4, Y14
	VMAXPS Y5, Y6, Y13
	VMAXPS Y7, Y8, Y8
	VMAXPS Y15, Y14, Y14
	VMAXPS Y13, Y8, Y8
	VMAXPS Y14, Y8, Y8
	VPERM2F128 $1, Y8, Y8, Y15
	VMAXPS Y15, Y8, Y8
	VPERMILPS $0x4e, Y8, Y15
	VMAXPS Y15, Y8, Y8
	VPERMILPS $0xb1, Y8, Y15
	VMAXPS Y15, Y8, Y8

	// Hot pixel: only with HotRatio set and a positive peak.
	CMPL 644(R8), $0
	JEQ  threshold
	VXORPS X14, X14, X14
	VUCOMISS X14, X8
	JLS  threshold
	VMOVUPS Y0, 48(SP)
	VMOVUPS Y1, 96(SP)
	VMOVUPS Y2, 144(SP)
	VMOVUPS Y3, 192(SP)
	VMOVUPS Y4, 240(SP)
	VMOVUPS Y5, 288(SP)
	VMOVUPS Y6, 336(SP)
	VMOVUPS Y7, 384(SP)
	// R13 bit 8y+x: pixel (x, y) is at the peak; its lowest bit is k, the
	// first in row-major order (no branch on where the spot is).
	VCMPPS $0, Y8, Y7, Y15
	VMOVMSKPS Y15, R13
	PEAKMASK(Y6)
	PEAKMASK(Y5)
	PEAKMASK(Y4)
	PEAKMASK(Y3)
	PEAKMASK(Y2)
	PEAKMASK(Y1)
	PEAKMASK(Y0)
	// n = the largest of k's four neighbours, at 12y+x of the padded rows
	// (k + 4y = 12y + x), at least HotFloor; hot if peak > HotRatio·n.
	BSFQ R13, R13
	MOVQ R13, DX
	SHRQ $3, DX
	LEAQ (R13)(DX*4), R13
	VMOVSS 652(R8), X14
	VMAXSS 44(SP)(R13*4), X14, X14
	VMAXSS 52(SP)(R13*4), X14, X14
	VMAXSS 0(SP)(R13*4), X14, X14
	VMAXSS 96(SP)(R13*4), X14, X14
	VMULSS 640(R8), X14, X14
	VUCOMISS X14, X8
	JLS  2(PC)
	INCQ 504(SP)

threshold:
	// thr = Threshold·peak; clipping (thr > 0) subtracts thr and floors at
	// 0, otherwise subtracts 0 and floors at −∞, which leaves v as it is.
	VMULPS 576(R8), Y8, Y12
	VXORPS Y14, Y14, Y14
	VCMPPS $0x0e, Y14, Y12, Y15
	VANDPS Y15, Y12, Y12
	VANDNPS 608(R8), Y15, Y13
	CLIP(Y0)
	CLIP(Y1)
	CLIP(Y2)
	CLIP(Y3)
	CLIP(Y4)
	CLIP(Y5)
	CLIP(Y6)
	CLIP(Y7)
	CMPL 648(R8), $0
	JEQ  moments
	VMULPS 288(R8), Y0, Y0
	VMULPS 320(R8), Y1, Y1
	VMULPS 352(R8), Y2, Y2
	VMULPS 384(R8), Y3, Y3
	VMULPS 416(R8), Y4, Y4
	VMULPS 448(R8), Y5, Y5
	VMULPS 480(R8), Y6, Y6
	VMULPS 512(R8), Y7, Y7

moments:
	// Row pairs: Y0–Y3 the sums a_0..a_3, Y7–Y4 the moments d_0..d_3.
	PAIR(Y0, Y7, 32)
	PAIR(Y1, Y6, 64)
	PAIR(Y2, Y5, 96)
	PAIR(Y3, Y4, 128)
	// S = (a0+a1) + (a2+a3), D = (d3+d2) + (d1+d0).
	VADDPS Y1, Y0, Y0
	VADDPS Y3, Y2, Y2
	VADDPS Y2, Y0, Y10
	VADDPS Y5, Y4, Y4
	VADDPS Y7, Y6, Y6
	VADDPS Y6, Y4, Y11
	// Across the columns in adjacent pairs, with X = S·xs:
	// Y14 = [X01 X23 D01 D23 | X45 X67 D45 D67], Y13 = [S01 S23 S01 S23 | …],
	// Y14 = [X0123 D0123 S0123 S0123 | X4567 …], X14 = [sx sy s s].
	VMULPS 0(R8), Y10, Y15
	VHADDPS Y11, Y15, Y14
	VHADDPS Y10, Y10, Y13
	VHADDPS Y13, Y14, Y14
	VEXTRACTF128 $1, Y14, X13
	VADDPS X13, X14, X14
	VPERMILPS $0xaa, X14, X10
	// Dark unless s > 0 (VUCOMISS b, a sets the flags of a against b).
	VXORPS X13, X13, X13
	VUCOMISS X13, X10
	JLS  dark
	// [sx/s − rx, sy/s − ry] into slopes[2i:2i+2].
	VDIVPS X10, X14, X14
	VMOVSD (R11)(AX*8), X13
	VSUBPS X13, X14, X14
	VMOVSD X14, (R12)(AX*8)
	JMP  next

dark:
	INCQ 488(SP)
	MOVQ $0, (R12)(AX*8)

next:
	ADDQ $4, SI
	DECQ CX
	JNZ  window
	JMP  done

deadrows:
	// Window i's rows again from start[i], R13 as scratch.
	MOVLQSX (R10)(AX*4), DX
	LEAQ (DI)(DX*2), DX
	DEADROW((DX), 8(DX))
	DEADROW((DX)(BX*1), 8(DX)(BX*1))
	DEADROW((DX)(BX*2), 8(DX)(BX*2))
	DEADROW((DX)(R14*1), 8(DX)(R14*1))
	LEAQ (DX)(BX*4), DX
	DEADROW((DX), 8(DX))
	DEADROW((DX)(BX*1), 8(DX)(BX*1))
	DEADROW((DX)(BX*2), 8(DX)(BX*2))
	DEADROW((DX)(R14*1), 8(DX)(R14*1))
	JMP  saturation

done:
	MOVQ flags+80(FP), DX
	MOVQ 480(SP), AX
	MOVQ AX, 0(DX)
	MOVQ 488(SP), AX
	MOVQ AX, 8(DX)
	MOVQ 496(SP), AX
	MOVQ AX, 16(DX)
	MOVQ 504(SP), AX
	MOVQ AX, 24(DX)
	VZEROUPPER
	RET
