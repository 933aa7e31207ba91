#include "textflag.h"

// QUANT is the quantize step over 8 weights in Y5, with x = w OP factor:
// trits to DI, totals into Y0 (Σ|w| over nonzero trits), Y1 (largest
// |w − scale·trit|), Y2 (nonzero), Y3 (trit sum), Y4 (clipped).
// Constants: Y15 factor, Y14 th, Y13 −th, Y12 scale, Y11 sign-clearing
// mask, Y10 clip. pos = x > th and neg = x < −th are masks of −1, so the
// trit is neg − pos and a count goes up by subtracting a mask; the largest
// error is over | |w| − (scale where the trit is nonzero, else +0) |.
#define QUANT(OP) \
	OP Y15, Y5, Y6; \
	VCMPPS $0x1e, Y14, Y6, Y7; \
	VCMPPS $0x11, Y13, Y6, Y8; \
	VPSUBD Y7, Y8, Y9; \
	VPADDD Y9, Y3, Y3; \
	VORPS  Y7, Y8, Y7; \
	VPSUBD Y7, Y2, Y2; \
	VANDPS Y11, Y6, Y6; \
	VCMPPS $0x1d, Y10, Y6, Y6; \
	VPSUBD Y6, Y4, Y4; \
	VANDPS Y11, Y5, Y5; \
	VANDPS Y7, Y5, Y8; \
	VADDPS Y8, Y0, Y0; \
	VANDPS Y7, Y12, Y8; \
	VSUBPS Y8, Y5, Y5; \
	VANDPS Y11, Y5, Y5; \
	VMAXPS Y5, Y1, Y1; \
	VEXTRACTI128 $1, Y9, X8; \
	VPACKSSDW X8, X9, X9; \
	VPACKSSWB X9, X9, X9; \
	VMOVQ X9, (DI)

#define QUANT_SETUP \
	MOVQ w+0(FP), SI; \
	MOVQ trits+8(FP), DI; \
	MOVQ n+16(FP), CX; \
	MOVQ c+24(FP), AX; \
	MOVQ l+32(FP), DX; \
	VBROADCASTSS 0(AX), Y15; \
	VBROADCASTSS 4(AX), Y14; \
	VBROADCASTSS 8(AX), Y13; \
	VBROADCASTSS 12(AX), Y10; \
	VBROADCASTSS 16(AX), Y12; \
	VPCMPEQD Y11, Y11, Y11; \
	VPSRLD $1, Y11, Y11; \
	VMOVUPS 0(DX), Y0; \
	VMOVUPS 32(DX), Y1; \
	VMOVDQU 64(DX), Y2; \
	VMOVDQU 96(DX), Y3; \
	VMOVDQU 128(DX), Y4

#define QUANT_DONE \
	VMOVUPS Y0, 0(DX); \
	VMOVUPS Y1, 32(DX); \
	VMOVDQU Y2, 64(DX); \
	VMOVDQU Y3, 96(DX); \
	VMOVDQU Y4, 128(DX); \
	VZEROUPPER; \
	RET


// ABS_SETUP loads the lanes: Y0..Y3 hold s[0:16] (at DI), Y4..Y7 hold
// q[0:16] (at DX); ABS_ADD adds 16 float64 values |w| in Y8..Y11 (lanes
// 0-3, 4-7, 8-11, 12-15) and their squares; ABS_DONE stores the lanes.
#define ABS_SETUP \
	MOVQ w+0(FP), SI; \
	MOVQ n+8(FP), CX; \
	MOVQ s+16(FP), DI; \
	MOVQ q+24(FP), DX; \
	VMOVUPD 0(DI), Y0; \
	VMOVUPD 32(DI), Y1; \
	VMOVUPD 64(DI), Y2; \
	VMOVUPD 96(DI), Y3; \
	VMOVUPD 0(DX), Y4; \
	VMOVUPD 32(DX), Y5; \
	VMOVUPD 64(DX), Y6; \
	VMOVUPD 96(DX), Y7

#define ABS_ADD \
	VADDPD Y8, Y0, Y0; \
	VADDPD Y9, Y1, Y1; \
	VADDPD Y10, Y2, Y2; \
	VADDPD Y11, Y3, Y3; \
	VMULPD Y8, Y8, Y8; \
	VMULPD Y9, Y9, Y9; \
	VMULPD Y10, Y10, Y10; \
	VMULPD Y11, Y11, Y11; \
	VADDPD Y8, Y4, Y4; \
	VADDPD Y9, Y5, Y5; \
	VADDPD Y10, Y6, Y6; \
	VADDPD Y11, Y7, Y7

#define ABS_DONE \
	VMOVUPD Y0, 0(DI); \
	VMOVUPD Y1, 32(DI); \
	VMOVUPD Y2, 64(DI); \
	VMOVUPD Y3, 96(DI); \
	VMOVUPD Y4, 0(DX); \
	VMOVUPD Y5, 32(DX); \
	VMOVUPD Y6, 64(DX); \
	VMOVUPD Y7, 96(DX); \
	VZEROUPPER; \
	RET

// func absLanes16AVX2(w *float32, n int, s, q *[16]float64)
// Y0..Y3 hold s[0:16], Y4..Y7 hold q[0:16]; each step widens 16 weights to
// float64, clears their sign bits and adds them (and their squares) to the
// lanes of their index mod 16.
TEXT ·absLanes16AVX2(SB), NOSPLIT, $0-32
	ABS_SETUP
	VPCMPEQQ Y15, Y15, Y15
	VPSRLQ $1, Y15, Y15 // 0x7fff_ffff_ffff_ffff: clears the sign bit

abs16:
	VCVTPS2PD 0(SI), Y8
	VCVTPS2PD 16(SI), Y9
	VCVTPS2PD 32(SI), Y10
	VCVTPS2PD 48(SI), Y11
	VANDPD Y15, Y8, Y8
	VANDPD Y15, Y9, Y9
	VANDPD Y15, Y10, Y10
	VANDPD Y15, Y11, Y11
	ABS_ADD
	ADDQ $64, SI
	SUBQ $16, CX
	JNZ  abs16

	ABS_DONE

// func quantMulAVX2(w *float32, trits *int8, n int, c *quantConsts, l *laneTotals)
TEXT ·quantMulAVX2(SB), NOSPLIT, $0-40
	QUANT_SETUP

mul8:
	VMOVUPS (SI), Y5
	QUANT(VMULPS)
	ADDQ $32, SI
	ADDQ $8, DI
	SUBQ $8, CX
	JNZ  mul8
	QUANT_DONE

// func quantDivAVX2(w *float32, trits *int8, n int, c *quantConsts, l *laneTotals)
TEXT ·quantDivAVX2(SB), NOSPLIT, $0-40
	QUANT_SETUP

div8:
	VMOVUPS (SI), Y5
	QUANT(VDIVPS)
	ADDQ $32, SI
	ADDQ $8, DI
	SUBQ $8, CX
	JNZ  div8
	QUANT_DONE

// func quantMulBF16AVX2(w *byte, trits *int8, n int, c *quantConsts, l *laneTotals)
// is quantMulAVX2 over BF16 weights, widened as they are loaded.
TEXT ·quantMulBF16AVX2(SB), NOSPLIT, $0-40
	QUANT_SETUP

mulbf8:
	VPMOVZXWD (SI), Y5
	VPSLLD $16, Y5, Y5
	QUANT(VMULPS)
	ADDQ $16, SI
	ADDQ $8, DI
	SUBQ $8, CX
	JNZ  mulbf8
	QUANT_DONE

// func quantDivBF16AVX2(w *byte, trits *int8, n int, c *quantConsts, l *laneTotals)
TEXT ·quantDivBF16AVX2(SB), NOSPLIT, $0-40
	QUANT_SETUP

divbf8:
	VPMOVZXWD (SI), Y5
	VPSLLD $16, Y5, Y5
	QUANT(VDIVPS)
	ADDQ $16, SI
	ADDQ $8, DI
	SUBQ $8, CX
	JNZ  divbf8
	QUANT_DONE

// func absLanes16BF16AVX2(w *byte, n int, s, q *[16]float64) is
// absLanes16AVX2 over BF16 weights.
TEXT ·absLanes16BF16AVX2(SB), NOSPLIT, $0-32
	ABS_SETUP
	VPCMPEQD Y15, Y15, Y15
	VPSRLD $1, Y15, Y15 // 0x7fff_ffff: clears a float32's sign bit

absbf16:
	VPMOVZXWD 0(SI), Y12
	VPMOVZXWD 16(SI), Y13
	VPSLLD $16, Y12, Y12
	VPSLLD $16, Y13, Y13
	VANDPS Y15, Y12, Y12
	VANDPS Y15, Y13, Y13
	VCVTPS2PD X12, Y8
	VEXTRACTF128 $1, Y12, X12
	VCVTPS2PD X12, Y9
	VCVTPS2PD X13, Y10
	VEXTRACTF128 $1, Y13, X13
	VCVTPS2PD X13, Y11
	ABS_ADD
	ADDQ $32, SI
	SUBQ $16, CX
	JNZ  absbf16

	ABS_DONE

// func decodeBF16AVX2(dst *float32, src *byte, n int) (nonFinite bool)
// A BF16 value is the top half of a float32; it is NaN or ±Inf exactly when
// its exponent bits are all set.
TEXT ·decodeBF16AVX2(SB), NOSPLIT, $0-25
	MOVQ dst+0(FP), DI
	MOVQ src+8(FP), SI
	MOVQ n+16(FP), CX
	VPCMPEQD Y15, Y15, Y15
	VPSLLD $24, Y15, Y15
	VPSRLD $1, Y15, Y15 // 0x7f80_0000: the exponent bits
	VPXOR Y14, Y14, Y14

bf16x8:
	VPMOVZXWD (SI), Y0
	VPSLLD $16, Y0, Y0
	VMOVDQU Y0, (DI)
	VPAND Y15, Y0, Y1
	VPCMPEQD Y15, Y1, Y1
	VPOR Y1, Y14, Y14
	ADDQ $16, SI
	ADDQ $32, DI
	SUBQ $8, CX
	JNZ  bf16x8

	VPTEST Y14, Y14
	SETNE nonFinite+24(FP)
	VZEROUPPER
	RET
