//go:build amd64

#include "textflag.h"

// Register use shared by the gemv kernels:
//   SI  stored element (row 4g, 0)      BX  row stride in bytes
//   CX  groups left                     DI  x
//   DX  bytes of one row block          R12 y
//   R13 add flag                        R14 3·stride
//   R8–R11 the four row pointers        AX  byte offset within the block

#define LOADARGS \
	MOVQ a+0(FP), SI \
	MOVQ stride+8(FP), BX \
	MOVQ groups+16(FP), CX \
	MOVQ x+24(FP), DI \
	MOVQ n+32(FP), DX \
	MOVQ y+40(FP), R12 \
	MOVBLZX add+48(FP), R13 \
	LEAQ (BX)(BX*2), R14

#define ROWPTRS \
	MOVQ SI, R8 \
	LEAQ (SI)(BX*1), R9 \
	LEAQ (SI)(BX*2), R10 \
	LEAQ (SI)(R14*1), R11 \
	XORQ AX, AX

// REDUCE4 folds the row sums in X0–X3 (4 lanes each) into X0 = (s0, s1, s2, s3)
// and stores or adds it to y[0:4], then advances to the next group.
#define REDUCE4 \
	VHADDPS X1, X0, X0 \
	VHADDPS X3, X2, X2 \
	VHADDPS X2, X0, X0 \
	TESTQ R13, R13 \
	JZ 2(PC) \
	VADDPS (R12), X0, X0 \
	VMOVUPS X0, (R12) \
	ADDQ $16, R12 \
	LEAQ (SI)(BX*4), SI

// SUMPTRS sets R8–R11 to the four segments of n floats starting at p.
#define SUMPTRS \
	MOVQ p+0(FP), R8 \
	MOVQ n+8(FP), DX \
	SHLQ $2, DX \
	LEAQ (R8)(DX*1), R9 \
	LEAQ (R9)(DX*1), R10 \
	LEAQ (R10)(DX*1), R11 \
	XORQ AX, AX

// FOLD256 halves Y0–Y3 into X0–X3, with X12–X15 as scratch (reloaded by
// every loop, unlike the bfloat16 mask in Y11).
#define FOLD256 \
	VEXTRACTF128 $1, Y0, X12 \
	VADDPS X12, X0, X0 \
	VEXTRACTF128 $1, Y1, X13 \
	VADDPS X13, X1, X1 \
	VEXTRACTF128 $1, Y2, X14 \
	VADDPS X14, X2, X2 \
	VEXTRACTF128 $1, Y3, X15 \
	VADDPS X15, X3, X3

// FOLD512 adds the second accumulators Z4–Z7 into Z0–Z3 and halves them into Y0–Y3.
#define FOLD512 \
	VADDPS Z4, Z0, Z0 \
	VADDPS Z5, Z1, Z1 \
	VADDPS Z6, Z2, Z2 \
	VADDPS Z7, Z3, Z3 \
	VEXTRACTF64X4 $1, Z0, Y8 \
	VADDPS Y8, Y0, Y0 \
	VEXTRACTF64X4 $1, Z1, Y9 \
	VADDPS Y9, Y1, Y1 \
	VEXTRACTF64X4 $1, Z2, Y10 \
	VADDPS Y10, Y2, Y2 \
	VEXTRACTF64X4 $1, Z3, Y11 \
	VADDPS Y11, Y3, Y3

// One bfloat16 row step, AVX2: 64 bytes = 32 columns of row p. Word k of the
// first 32 bytes holds columns k (low half) and 16+k (high half), of the
// second 32 bytes columns 8+k and 24+k; x[0:8], x[8:16], x[16:24], x[24:32]
// are in Y12–Y15 and Y11 is 0xffff0000 in every lane.
#define B2ROW(p, lo, hi) \
	VMOVDQU (p)(AX*1), Y8 \
	VPSLLD $16, Y8, Y9 \
	VPAND Y11, Y8, Y8 \
	VFMADD231PS Y9, Y12, lo \
	VFMADD231PS Y8, Y14, hi \
	VMOVDQU 32(p)(AX*1), Y10 \
	VPSLLD $16, Y10, Y9 \
	VPAND Y11, Y10, Y10 \
	VFMADD231PS Y9, Y13, lo \
	VFMADD231PS Y10, Y15, hi

// One bfloat16 row step, AVX-512: one cache line = 32 columns of row p; the
// low halves are columns 0–15 (x in Z8), the high halves 16–31 (x in Z9);
// Z31 is 0xffff0000 in every lane.
#define B5ROW(p, t0, t1, lo, hi) \
	VMOVDQU32 (p)(AX*1), t0 \
	VPSLLD $16, t0, t1 \
	VPANDD Z31, t0, t0 \
	VFMADD231PS t1, Z8, lo \
	VFMADD231PS t0, Z9, hi

// The float32 kernels take any n >= 1 and an a and x of any float32
// alignment: whole vectors first, then one step whose loads are masked to the
// last n mod (vector width) columns. Masked-off elements are neither read
// nor able to fault, so neither the row nor x needs padding, and a column
// range is multiplied on the caller's x in place.

// tailMask<>: eight all-ones words then eight zero words; the 8 words at
// byte 4·(8−r) are the AVX2 load mask of the first r lanes.
DATA tailMask<>+0(SB)/8, $0xffffffffffffffff
DATA tailMask<>+8(SB)/8, $0xffffffffffffffff
DATA tailMask<>+16(SB)/8, $0xffffffffffffffff
DATA tailMask<>+24(SB)/8, $0xffffffffffffffff
DATA tailMask<>+32(SB)/8, $0
DATA tailMask<>+40(SB)/8, $0
DATA tailMask<>+48(SB)/8, $0
DATA tailMask<>+56(SB)/8, $0
GLOBL tailMask<>(SB), RODATA|NOPTR, $64

// F2ROW4 is one 8-column step of the four rows at R8 (advancing pointer),
// x in Y8; acc0–acc3 are the accumulators of rows 0–3.
#define F2ROW4(off, acc0, acc1, acc2, acc3) \
	VFMADD231PS off(R8), Y8, acc0 \
	VFMADD231PS off(R8)(BX*1), Y8, acc1 \
	VFMADD231PS off(R8)(BX*2), Y8, acc2 \
	VFMADD231PS off(R8)(R14*1), Y8, acc3

// func gemvF32AVX2(a unsafe.Pointer, stride uintptr, groups int, x *float32, n int, y *float32, add bool)
//
// Registers: SI row 4g; R8 row 4g at column AX/4; BX stride; R14 3·stride;
// DI x; CX groups left; R10 n; R11 bytes of whole 16-column steps; R12 y;
// R13 add; Y10 the tail load mask (FOLD256 takes X12–X15).
TEXT ·gemvF32AVX2(SB), NOSPLIT, $0-49
	MOVQ n+32(FP), R10
	MOVQ R10, AX
	ANDQ $7, AX
	NEGQ AX
	LEAQ tailMask<>(SB), R11
	VMOVDQU 32(R11)(AX*4), Y10
	MOVQ R10, R11
	ANDQ $-16, R11
	SHLQ $2, R11
	MOVQ a+0(FP), SI
	MOVQ stride+8(FP), BX
	MOVQ groups+16(FP), CX
	MOVQ x+24(FP), DI
	MOVQ y+40(FP), R12
	MOVBLZX add+48(FP), R13
	LEAQ (BX)(BX*2), R14

f2group:
	MOVQ SI, R8
	XORQ AX, AX
	VXORPS Y0, Y0, Y0
	VXORPS Y1, Y1, Y1
	VXORPS Y2, Y2, Y2
	VXORPS Y3, Y3, Y3
	VXORPS Y4, Y4, Y4
	VXORPS Y5, Y5, Y5
	VXORPS Y6, Y6, Y6
	VXORPS Y7, Y7, Y7
	TESTQ R11, R11
	JZ   f2eight

f2loop:
	VMOVUPS (DI)(AX*1), Y8
	F2ROW4(0, Y0, Y1, Y2, Y3)
	VMOVUPS 32(DI)(AX*1), Y8
	F2ROW4(32, Y4, Y5, Y6, Y7)
	ADDQ $64, AX
	ADDQ $64, R8
	CMPQ AX, R11
	JB   f2loop

f2eight:
	TESTQ $8, R10
	JZ   f2tail
	VMOVUPS (DI)(AX*1), Y8
	F2ROW4(0, Y0, Y1, Y2, Y3)
	ADDQ $32, AX
	ADDQ $32, R8

f2tail:
	TESTQ $7, R10
	JZ   f2reduce
	VMASKMOVPS (DI)(AX*1), Y10, Y8
	VMASKMOVPS (R8), Y10, Y9
	VFMADD231PS Y9, Y8, Y4
	VMASKMOVPS (R8)(BX*1), Y10, Y9
	VFMADD231PS Y9, Y8, Y5
	VMASKMOVPS (R8)(BX*2), Y10, Y9
	VFMADD231PS Y9, Y8, Y6
	VMASKMOVPS (R8)(R14*1), Y10, Y9
	VFMADD231PS Y9, Y8, Y7

f2reduce:
	VADDPS Y4, Y0, Y0
	VADDPS Y5, Y1, Y1
	VADDPS Y6, Y2, Y2
	VADDPS Y7, Y3, Y3
	FOLD256
	REDUCE4
	DECQ CX
	JNZ  f2group
	VZEROUPPER
	RET

// prefetchAhead is how far ahead of the loads the AVX-512 kernel prefetches
// each row, in bytes: two 128-byte steps. One PREFETCHT0 per row per step
// covers both lines of the step, as the L2 adjacent-line prefetcher fetches
// the other half of each aligned 128-byte pair (the adjacent-line
// prefetcher of current x86-64 cores, as the processor vendors' optimisation
// manuals describe it; *from memory*). Measured on this package's 8-row loop with the
// BenchmarkMVM shapes, distances alternated in random order in one run:
// against no prefetch, 256 B gained 4–7 % at 3300×6400 (streamed from DRAM)
// and was even (±2 %) at 850×1600 and 1300×2500 (from L3); 1 KiB gained as
// much at 3300×6400 but lost 2–3 % at 850×1600, and 2 KiB lost 9 % there.
#define prefetchAhead 256

// Z0–Z7 and Z8–Z15 are the two accumulators of rows 0–7 of a pass; Z16,
// Z17 hold x.
#define ZERO16 \
	VPXORD Z0, Z0, Z0 \
	VPXORD Z1, Z1, Z1 \
	VPXORD Z2, Z2, Z2 \
	VPXORD Z3, Z3, Z3 \
	VPXORD Z4, Z4, Z4 \
	VPXORD Z5, Z5, Z5 \
	VPXORD Z6, Z6, Z6 \
	VPXORD Z7, Z7, Z7 \
	VPXORD Z8, Z8, Z8 \
	VPXORD Z9, Z9, Z9 \
	VPXORD Z10, Z10, Z10 \
	VPXORD Z11, Z11, Z11 \
	VPXORD Z12, Z12, Z12 \
	VPXORD Z13, Z13, Z13 \
	VPXORD Z14, Z14, Z14 \
	VPXORD Z15, Z15, Z15

// F5ROWS4 is one 16-column step of rows 0–3 (at R8) with x in xr.
#define F5ROWS4(off, xr, a0, a1, a2, a3) \
	VFMADD231PS off(R8), xr, a0 \
	VFMADD231PS off(R8)(BX*1), xr, a1 \
	VFMADD231PS off(R8)(BX*2), xr, a2 \
	VFMADD231PS off(R8)(R14*1), xr, a3

// F5ROWS8 adds rows 4–7 (R8 + 4·stride and R9 = R8 + 5·stride).
#define F5ROWS8(off, xr, a0, a1, a2, a3, a4, a5, a6, a7) \
	F5ROWS4(off, xr, a0, a1, a2, a3) \
	VFMADD231PS off(R8)(BX*4), xr, a4 \
	VFMADD231PS off(R9), xr, a5 \
	VFMADD231PS off(R9)(BX*1), xr, a6 \
	VFMADD231PS off(R9)(BX*2), xr, a7

// F5MASK is the masked last step of one row: lanes outside K1 are not read
// and leave the accumulator unchanged.
#define F5MASK(addr, acc) \
	VFMADD231PS addr, Z16, K1, acc

// The row sums of a pass are reduced by transposing as they are added, all
// in zmm registers: F5SUM2 leaves, in each 128-bit lane, two partial sums of
// rows a and b interleaved (a, b, a, b); F5SUM4 combines two such results
// into one partial sum of each of four rows per lane (r0, r1, r2, r3); what
// is left is the sum of the four lanes. Fewer shuffles than extracting
// halves and horizontal adds, and no 256-bit operation on Z16–Z31 (which
// would need AVX-512VL).
#define F5SUM2(a, b, t0, t1) \
	VUNPCKLPS b, a, t0 \
	VUNPCKHPS b, a, t1 \
	VADDPS t1, t0, t0

#define F5SUM4(s01, s23, t0, t1) \
	VSHUFPS $0x44, s23, s01, t0 \
	VSHUFPS $0xee, s23, s01, t1 \
	VADDPS t1, t0, t0

// func gemvF32AVX512(a unsafe.Pointer, stride uintptr, groups int, x *float32, n int, y *float32, add bool)
//
// Eight rows per pass (two groups) while two groups are left, then four:
// one load of x feeds eight FMAs and sixteen independent chains cover the
// FMA latency. Registers: SI row 8p; R8 row 8p at column AX/4, R9 row 8p+5
// likewise; BX stride; R14 3·stride; DI x; CX groups left; R10 n; R11 bytes
// of whole 32-column steps; R12 y; R13 add; K1 the tail mask.
TEXT ·gemvF32AVX512(SB), NOSPLIT, $0-49
	MOVQ n+32(FP), R10
	MOVQ R10, CX
	ANDQ $15, CX
	MOVL $1, AX
	SHLL CX, AX
	DECL AX
	KMOVW AX, K1
	MOVQ R10, R11
	ANDQ $-32, R11
	SHLQ $2, R11
	MOVQ a+0(FP), SI
	MOVQ stride+8(FP), BX
	MOVQ groups+16(FP), CX
	MOVQ x+24(FP), DI
	MOVQ y+40(FP), R12
	MOVBLZX add+48(FP), R13
	LEAQ (BX)(BX*2), R14

f5pair:
	CMPQ CX, $2
	JB   f5four
	MOVQ SI, R8
	LEAQ (SI)(BX*4), R9
	ADDQ BX, R9
	XORQ AX, AX
	ZERO16
	TESTQ R11, R11
	JZ   f5p16

f5ploop:
	PREFETCHT0 prefetchAhead(R8)
	PREFETCHT0 prefetchAhead(R8)(BX*1)
	PREFETCHT0 prefetchAhead(R8)(BX*2)
	PREFETCHT0 prefetchAhead(R8)(R14*1)
	PREFETCHT0 prefetchAhead(R8)(BX*4)
	PREFETCHT0 prefetchAhead(R9)
	PREFETCHT0 prefetchAhead(R9)(BX*1)
	PREFETCHT0 prefetchAhead(R9)(BX*2)
	VMOVUPS (DI)(AX*1), Z16
	VMOVUPS 64(DI)(AX*1), Z17
	F5ROWS8(0, Z16, Z0, Z1, Z2, Z3, Z4, Z5, Z6, Z7)
	F5ROWS8(64, Z17, Z8, Z9, Z10, Z11, Z12, Z13, Z14, Z15)
	ADDQ $128, AX
	ADDQ $128, R8
	ADDQ $128, R9
	CMPQ AX, R11
	JB   f5ploop

f5p16:
	TESTQ $16, R10
	JZ   f5ptail
	VMOVUPS (DI)(AX*1), Z16
	F5ROWS8(0, Z16, Z0, Z1, Z2, Z3, Z4, Z5, Z6, Z7)
	ADDQ $64, AX
	ADDQ $64, R8
	ADDQ $64, R9

f5ptail:
	TESTQ $15, R10
	JZ   f5preduce
	VMOVUPS.Z (DI)(AX*1), K1, Z16
	F5MASK((R8), Z8)
	F5MASK((R8)(BX*1), Z9)
	F5MASK((R8)(BX*2), Z10)
	F5MASK((R8)(R14*1), Z11)
	F5MASK((R8)(BX*4), Z12)
	F5MASK((R9), Z13)
	F5MASK((R9)(BX*1), Z14)
	F5MASK((R9)(BX*2), Z15)

f5preduce:
	VADDPS Z8, Z0, Z0
	VADDPS Z9, Z1, Z1
	VADDPS Z10, Z2, Z2
	VADDPS Z11, Z3, Z3
	VADDPS Z12, Z4, Z4
	VADDPS Z13, Z5, Z5
	VADDPS Z14, Z6, Z6
	VADDPS Z15, Z7, Z7
	F5SUM2(Z0, Z1, Z16, Z17)
	F5SUM2(Z2, Z3, Z18, Z19)
	F5SUM2(Z4, Z5, Z20, Z21)
	F5SUM2(Z6, Z7, Z22, Z23)
	F5SUM4(Z16, Z18, Z24, Z25)
	F5SUM4(Z20, Z22, Z26, Z27)
	VSHUFF32X4 $0x44, Z26, Z24, Z28
	VSHUFF32X4 $0xee, Z26, Z24, Z29
	VADDPS Z29, Z28, Z28
	VSHUFF32X4 $0xb1, Z28, Z28, Z29
	VADDPS Z29, Z28, Z0
	VEXTRACTF32X4 $2, Z0, X1
	TESTQ R13, R13
	JZ   f5pstore
	VADDPS (R12), X0, X0
	VADDPS 16(R12), X1, X1

f5pstore:
	VMOVUPS X0, (R12)
	VMOVUPS X1, 16(R12)
	ADDQ $32, R12
	LEAQ (SI)(BX*8), SI
	SUBQ $2, CX
	JMP  f5pair

f5four:
	TESTQ CX, CX
	JZ   f5done
	MOVQ SI, R8
	XORQ AX, AX
	ZERO16
	TESTQ R11, R11
	JZ   f5f16

f5floop:
	VMOVUPS (DI)(AX*1), Z16
	VMOVUPS 64(DI)(AX*1), Z17
	F5ROWS4(0, Z16, Z0, Z1, Z2, Z3)
	F5ROWS4(64, Z17, Z8, Z9, Z10, Z11)
	ADDQ $128, AX
	ADDQ $128, R8
	CMPQ AX, R11
	JB   f5floop

f5f16:
	TESTQ $16, R10
	JZ   f5ftail
	VMOVUPS (DI)(AX*1), Z16
	F5ROWS4(0, Z16, Z0, Z1, Z2, Z3)
	ADDQ $64, AX
	ADDQ $64, R8

f5ftail:
	TESTQ $15, R10
	JZ   f5freduce
	VMOVUPS.Z (DI)(AX*1), K1, Z16
	F5MASK((R8), Z8)
	F5MASK((R8)(BX*1), Z9)
	F5MASK((R8)(BX*2), Z10)
	F5MASK((R8)(R14*1), Z11)

f5freduce:
	VADDPS Z8, Z0, Z0
	VADDPS Z9, Z1, Z1
	VADDPS Z10, Z2, Z2
	VADDPS Z11, Z3, Z3
	F5SUM2(Z0, Z1, Z16, Z17)
	F5SUM2(Z2, Z3, Z18, Z19)
	F5SUM4(Z16, Z18, Z24, Z25)
	VSHUFF32X4 $0xee, Z24, Z24, Z25
	VADDPS Z25, Z24, Z24
	VSHUFF32X4 $0xb1, Z24, Z24, Z25
	VADDPS Z25, Z24, Z0
	TESTQ R13, R13
	JZ   2(PC)
	VADDPS (R12), X0, X0
	VMOVUPS X0, (R12)

f5done:
	VZEROUPPER
	RET

// func gemvBF16AVX2(a unsafe.Pointer, stride uintptr, groups int, x *float32, n int, y *float32, add bool)
TEXT ·gemvBF16AVX2(SB), NOSPLIT, $0-49
	LOADARGS
	SHLQ $1, DX
	VPCMPEQD Y11, Y11, Y11
	VPSLLD $16, Y11, Y11

b2group:
	ROWPTRS
	VXORPS Y0, Y0, Y0
	VXORPS Y1, Y1, Y1
	VXORPS Y2, Y2, Y2
	VXORPS Y3, Y3, Y3
	VXORPS Y4, Y4, Y4
	VXORPS Y5, Y5, Y5
	VXORPS Y6, Y6, Y6
	VXORPS Y7, Y7, Y7

b2loop:
	VMOVUPS (DI)(AX*2), Y12
	VMOVUPS 32(DI)(AX*2), Y13
	VMOVUPS 64(DI)(AX*2), Y14
	VMOVUPS 96(DI)(AX*2), Y15
	B2ROW(R8, Y0, Y4)
	B2ROW(R9, Y1, Y5)
	B2ROW(R10, Y2, Y6)
	B2ROW(R11, Y3, Y7)
	ADDQ $64, AX
	CMPQ AX, DX
	JB   b2loop

	VADDPS Y4, Y0, Y0
	VADDPS Y5, Y1, Y1
	VADDPS Y6, Y2, Y2
	VADDPS Y7, Y3, Y3
	FOLD256
	REDUCE4
	DECQ CX
	JNZ  b2group
	VZEROUPPER
	RET

// func gemvBF16AVX512(a unsafe.Pointer, stride uintptr, groups int, x *float32, n int, y *float32, add bool)
TEXT ·gemvBF16AVX512(SB), NOSPLIT, $0-49
	LOADARGS
	SHLQ $1, DX
	VPTERNLOGD $0xff, Z31, Z31, Z31
	VPSLLD $16, Z31, Z31

b5group:
	ROWPTRS
	VPXORD Z0, Z0, Z0
	VPXORD Z1, Z1, Z1
	VPXORD Z2, Z2, Z2
	VPXORD Z3, Z3, Z3
	VPXORD Z4, Z4, Z4
	VPXORD Z5, Z5, Z5
	VPXORD Z6, Z6, Z6
	VPXORD Z7, Z7, Z7

b5loop:
	VMOVUPS (DI)(AX*2), Z8
	VMOVUPS 64(DI)(AX*2), Z9
	B5ROW(R8, Z10, Z11, Z0, Z4)
	B5ROW(R9, Z12, Z13, Z1, Z5)
	B5ROW(R10, Z14, Z15, Z2, Z6)
	B5ROW(R11, Z16, Z17, Z3, Z7)
	ADDQ $64, AX
	CMPQ AX, DX
	JB   b5loop

	FOLD512
	FOLD256
	REDUCE4
	DECQ CX
	JNZ  b5group
	VZEROUPPER
	RET

// func sumF32AVX2(p *float32, n int) float32
TEXT ·sumF32AVX2(SB), NOSPLIT, $0-20
	SUMPTRS
	VXORPS Y0, Y0, Y0
	VXORPS Y1, Y1, Y1
	VXORPS Y2, Y2, Y2
	VXORPS Y3, Y3, Y3
	VXORPS Y4, Y4, Y4
	VXORPS Y5, Y5, Y5
	VXORPS Y6, Y6, Y6
	VXORPS Y7, Y7, Y7

s2loop:
	VADDPS (R8)(AX*1), Y0, Y0
	VADDPS (R9)(AX*1), Y1, Y1
	VADDPS (R10)(AX*1), Y2, Y2
	VADDPS (R11)(AX*1), Y3, Y3
	VADDPS 32(R8)(AX*1), Y4, Y4
	VADDPS 32(R9)(AX*1), Y5, Y5
	VADDPS 32(R10)(AX*1), Y6, Y6
	VADDPS 32(R11)(AX*1), Y7, Y7
	ADDQ $64, AX
	CMPQ AX, DX
	JB   s2loop

	VADDPS Y4, Y0, Y0
	VADDPS Y5, Y1, Y1
	VADDPS Y6, Y2, Y2
	VADDPS Y7, Y3, Y3
	VADDPS Y1, Y0, Y0
	VADDPS Y3, Y2, Y2
	VADDPS Y2, Y0, Y0
	VEXTRACTF128 $1, Y0, X1
	VADDPS X1, X0, X0
	VHADDPS X0, X0, X0
	VHADDPS X0, X0, X0
	VMOVSS X0, ret+16(FP)
	VZEROUPPER
	RET

// func sumF32AVX512(p *float32, n int) float32
//
// It prefetches like gemvF32AVX512, so the yardstick reads as fast as the
// product's own loads can.
TEXT ·sumF32AVX512(SB), NOSPLIT, $0-20
	SUMPTRS
	VPXORD Z0, Z0, Z0
	VPXORD Z1, Z1, Z1
	VPXORD Z2, Z2, Z2
	VPXORD Z3, Z3, Z3
	VPXORD Z4, Z4, Z4
	VPXORD Z5, Z5, Z5
	VPXORD Z6, Z6, Z6
	VPXORD Z7, Z7, Z7

s5loop:
	PREFETCHT0 prefetchAhead(R8)(AX*1)
	PREFETCHT0 prefetchAhead(R9)(AX*1)
	PREFETCHT0 prefetchAhead(R10)(AX*1)
	PREFETCHT0 prefetchAhead(R11)(AX*1)
	VADDPS (R8)(AX*1), Z0, Z0
	VADDPS (R9)(AX*1), Z1, Z1
	VADDPS (R10)(AX*1), Z2, Z2
	VADDPS (R11)(AX*1), Z3, Z3
	VADDPS 64(R8)(AX*1), Z4, Z4
	VADDPS 64(R9)(AX*1), Z5, Z5
	VADDPS 64(R10)(AX*1), Z6, Z6
	VADDPS 64(R11)(AX*1), Z7, Z7
	ADDQ $128, AX
	CMPQ AX, DX
	JB   s5loop

	VADDPS Z4, Z0, Z0
	VADDPS Z5, Z1, Z1
	VADDPS Z6, Z2, Z2
	VADDPS Z7, Z3, Z3
	VADDPS Z1, Z0, Z0
	VADDPS Z3, Z2, Z2
	VADDPS Z2, Z0, Z0
	VEXTRACTF64X4 $1, Z0, Y1
	VADDPS Y1, Y0, Y0
	VEXTRACTF128 $1, Y0, X1
	VADDPS X1, X0, X0
	VHADDPS X0, X0, X0
	VHADDPS X0, X0, X0
	VMOVSS X0, ret+16(FP)
	VZEROUPPER
	RET

// func pause()
TEXT ·pause(SB), NOSPLIT, $0-0
	PAUSE
	RET
