#include "textflag.h"

// EXCESS is boundExcess over 4 weights in W (float64) with their s·t in R
// (float64), into the running maxima M:
// a = |w|, d = |w − r|, b = 1.0 where a > 1.5·s else 0.0,
// e = (d − s/2)·(1 − b) + |d − (a − s)|·b, M = max(e, M) (a NaN e leaves M).
// Constants: Y15 sign-clearing mask, Y14 1.0, Y13 s, Y12 s/2, Y11 1.5·s.
#define EXCESS(W, R, M) \
	VSUBPD R, W, R; \
	VANDPD Y15, R, R; \
	VANDPD Y15, W, W; \
	VCMPPD $0x1e, Y11, W, Y6; \
	VANDPD Y14, Y6, Y6; \
	VSUBPD Y6, Y14, Y7; \
	VSUBPD Y13, W, W; \
	VSUBPD W, R, W; \
	VANDPD Y15, W, W; \
	VMULPD Y6, W, W; \
	VSUBPD Y12, R, R; \
	VMULPD Y7, R, R; \
	VADDPD W, R, R; \
	VMAXPD M, R, M

// BOUND_SETUP loads the arguments and constants of both kernels below.
#define BOUND_SETUP \
	MOVQ w+0(FP), SI; \
	MOVQ trits+8(FP), DI; \
	MOVQ n+16(FP), CX; \
	MOVQ c+24(FP), AX; \
	MOVQ out+32(FP), BX; \
	VBROADCASTSD 0(AX), Y13; \
	VBROADCASTSD 8(AX), Y12; \
	VBROADCASTSD 16(AX), Y11; \
	VBROADCASTSS 24(AX), Y10; \
	VPCMPEQQ Y15, Y15, Y15; \
	VPSRLQ $1, Y15, Y15; \
	MOVQ $0x3ff0000000000000, DX; \
	VMOVQ DX, X14; \
	VPBROADCASTQ X14, Y14; \
	MOVQ $0xfff0000000000000, DX; \
	VMOVQ DX, X1; \
	VPBROADCASTQ X1, Y1

// BOUND_STEP takes 8 elements: weights 0-3 and 4-7 as float64 in Y0 and
// Y4, their trits at DI; s·t is computed in float32, as boundExcess does.
#define BOUND_STEP \
	VPMOVSXBD (DI), Y2; \
	VCVTDQ2PS Y2, Y2; \
	VMULPS Y10, Y2, Y2; \
	VCVTPS2PD X2, Y3; \
	VEXTRACTF128 $1, Y2, X2; \
	VCVTPS2PD X2, Y5; \
	EXCESS(Y0, Y3, Y9); \
	EXCESS(Y4, Y5, Y8); \
	ADDQ $8, DI

// BOUND_STORE reduces a block's maxima Y9 and Y8 to one float64 at (BX),
// −0 made +0.
#define BOUND_STORE \
	VMAXPD Y8, Y9, Y9; \
	VEXTRACTF128 $1, Y9, X8; \
	VMAXPD X8, X9, X9; \
	VPERMILPD $1, X9, X8; \
	VMAXPD X8, X9, X9; \
	VXORPD X8, X8, X8; \
	VADDSD X8, X9, X9; \
	VMOVSD X9, (BX); \
	ADDQ $8, BX

// func blockMaximaAVX2(w *float32, trits *int8, n int, c *boundConsts, out *[boundChunk]float64)
// Each block of 32 elements is four steps of 8 into the maxima Y9 and Y8
// (each starting at −Inf), reduced to one float64 stored to (BX).
// Constants: Y15 sign-clearing mask, Y14 1.0, Y13 s, Y12 s/2, Y11 1.5·s,
// Y10 s in float32, Y1 −Inf.
TEXT ·blockMaximaAVX2(SB), NOSPLIT, $0-40
	BOUND_SETUP

block32:
	VMOVAPD Y1, Y9
	VMOVAPD Y1, Y8
	MOVQ $4, DX

excess8:
	VCVTPS2PD 0(SI), Y0
	VCVTPS2PD 16(SI), Y4
	BOUND_STEP
	ADDQ $32, SI
	DECQ DX
	JNZ  excess8

	BOUND_STORE
	SUBQ $32, CX
	JNZ  block32

	VZEROUPPER
	RET

// func blockMaximaBF16AVX2(w *byte, trits *int8, n int, c *boundConsts, out *[boundChunk]float64)
// is blockMaximaAVX2 over little-endian BF16 weights, widened as loaded.
TEXT ·blockMaximaBF16AVX2(SB), NOSPLIT, $0-40
	BOUND_SETUP

bfblock32:
	VMOVAPD Y1, Y9
	VMOVAPD Y1, Y8
	MOVQ $4, DX

bfexcess8:
	VPMOVZXWD (SI), Y4
	VPSLLD $16, Y4, Y4
	VCVTPS2PD X4, Y0
	VEXTRACTF128 $1, Y4, X4
	VCVTPS2PD X4, Y4
	BOUND_STEP
	ADDQ $16, SI
	DECQ DX
	JNZ  bfexcess8

	BOUND_STORE
	SUBQ $32, CX
	JNZ  bfblock32

	VZEROUPPER
	RET
