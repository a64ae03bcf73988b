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

// func gemvF32AVX2(a unsafe.Pointer, stride uintptr, groups int, x *float32, n int, y *float32, add bool)
TEXT ·gemvF32AVX2(SB), NOSPLIT, $0-49
	LOADARGS
	SHLQ $2, DX

f2group:
	ROWPTRS
	VXORPS Y0, Y0, Y0
	VXORPS Y1, Y1, Y1
	VXORPS Y2, Y2, Y2
	VXORPS Y3, Y3, Y3
	VXORPS Y4, Y4, Y4
	VXORPS Y5, Y5, Y5
	VXORPS Y6, Y6, Y6
	VXORPS Y7, Y7, Y7

f2loop:
	VMOVUPS (DI)(AX*1), Y8
	VMOVUPS 32(DI)(AX*1), Y9
	VFMADD231PS (R8)(AX*1), Y8, Y0
	VFMADD231PS 32(R8)(AX*1), Y9, Y4
	VFMADD231PS (R9)(AX*1), Y8, Y1
	VFMADD231PS 32(R9)(AX*1), Y9, Y5
	VFMADD231PS (R10)(AX*1), Y8, Y2
	VFMADD231PS 32(R10)(AX*1), Y9, Y6
	VFMADD231PS (R11)(AX*1), Y8, Y3
	VFMADD231PS 32(R11)(AX*1), Y9, Y7
	ADDQ $64, AX
	CMPQ AX, DX
	JB   f2loop

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

// func gemvF32AVX512(a unsafe.Pointer, stride uintptr, groups int, x *float32, n int, y *float32, add bool)
TEXT ·gemvF32AVX512(SB), NOSPLIT, $0-49
	LOADARGS
	SHLQ $2, DX

f5group:
	ROWPTRS
	VXORPS Z0, Z0, Z0
	VXORPS Z1, Z1, Z1
	VXORPS Z2, Z2, Z2
	VXORPS Z3, Z3, Z3
	VXORPS Z4, Z4, Z4
	VXORPS Z5, Z5, Z5
	VXORPS Z6, Z6, Z6
	VXORPS Z7, Z7, Z7

f5loop:
	VMOVUPS (DI)(AX*1), Z8
	VMOVUPS 64(DI)(AX*1), Z9
	VFMADD231PS (R8)(AX*1), Z8, Z0
	VFMADD231PS 64(R8)(AX*1), Z9, Z4
	VFMADD231PS (R9)(AX*1), Z8, Z1
	VFMADD231PS 64(R9)(AX*1), Z9, Z5
	VFMADD231PS (R10)(AX*1), Z8, Z2
	VFMADD231PS 64(R10)(AX*1), Z9, Z6
	VFMADD231PS (R11)(AX*1), Z8, Z3
	VFMADD231PS 64(R11)(AX*1), Z9, Z7
	ADDQ $128, AX
	CMPQ AX, DX
	JB   f5loop

	FOLD512
	FOLD256
	REDUCE4
	DECQ CX
	JNZ  f5group
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
	VXORPS Z0, Z0, Z0
	VXORPS Z1, Z1, Z1
	VXORPS Z2, Z2, Z2
	VXORPS Z3, Z3, Z3
	VXORPS Z4, Z4, Z4
	VXORPS Z5, Z5, Z5
	VXORPS Z6, Z6, Z6
	VXORPS Z7, Z7, Z7

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
TEXT ·sumF32AVX512(SB), NOSPLIT, $0-20
	SUMPTRS
	VXORPS Z0, Z0, Z0
	VXORPS Z1, Z1, Z1
	VXORPS Z2, Z2, Z2
	VXORPS Z3, Z3, Z3
	VXORPS Z4, Z4, Z4
	VXORPS Z5, Z5, Z5
	VXORPS Z6, Z6, Z6
	VXORPS Z7, Z7, Z7

s5loop:
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
