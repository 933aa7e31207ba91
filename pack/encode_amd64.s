#include "textflag.h"

// CODES turns the trit bytes of Y0 (0, 1 or −1) into their codes (0, 1,
// 2): (t & 3) ^ ((t >> 1) & 1), as codeOf. Y15 holds bytes 0x03, Y14
// bytes 0x01.
#define CODES \
	VPAND Y15, Y0, Y1; \
	VPSRLW $1, Y0, Y2; \
	VPAND Y14, Y2, Y2; \
	VPXOR Y2, Y1, Y0

#define BYTE_CONSTS \
	MOVL $0x03030303, AX; \
	VMOVD AX, X15; \
	VPBROADCASTD X15, Y15; \
	MOVL $0x01010101, AX; \
	VMOVD AX, X14; \
	VPBROADCASTD X14, Y14

// func encodeBits2AVX2(dst *byte, src *int8, n int)
// 32 trits → 8 bytes: codes c0..c3 of each byte are weighed 1, 4 by
// VPMADDUBSW into words and 1, 16 by VPMADDWD into dwords, c0 + 4·c1 +
// 16·c2 + 64·c3, then packed down to bytes.
TEXT ·encodeBits2AVX2(SB), NOSPLIT, $0-24
	MOVQ dst+0(FP), DI
	MOVQ src+8(FP), SI
	MOVQ n+16(FP), CX
	BYTE_CONSTS
	MOVL $0x04010401, AX
	VMOVD AX, X13
	VPBROADCASTD X13, Y13 // bytes 1, 4
	MOVL $0x00100001, AX
	VMOVD AX, X12
	VPBROADCASTD X12, Y12 // words 1, 16

bits32:
	VMOVDQU (SI), Y0
	CODES
	VPMADDUBSW Y13, Y0, Y0
	VPMADDWD Y12, Y0, Y0
	VPACKUSDW Y0, Y0, Y0
	VPACKUSWB Y0, Y0, Y0
	VEXTRACTI128 $1, Y0, X1
	VPUNPCKLDQ X1, X0, X0
	VMOVQ X0, (DI)
	ADDQ $32, SI
	ADDQ $8, DI
	SUBQ $32, CX
	JNZ  bits32
	VZEROUPPER
	RET

// func encodeBase3AVX2(dst *byte, src *int8, n int)
// 20 trits → 4 bytes; reads 6 bytes past the n trits. Each 128-bit lane
// takes 16 trits (from 0 and from 10) and shuffles two groups of five into
// 8-byte slots [d0 d1 d2 d3 d4 0 0 0]; VPMADDUBSW weighs them 1, 3, 9, 27,
// 81, VPMADDWD adds the pairs, and the two dwords of a slot are added:
// d0 + 3·d1 + 9·d2 + 27·d3 + 81·d4 in the slot's low byte.
TEXT ·encodeBase3AVX2(SB), NOSPLIT, $0-24
	MOVQ dst+0(FP), DI
	MOVQ src+8(FP), SI
	MOVQ n+16(FP), CX
	BYTE_CONSTS
	MOVQ $0x8080800403020100, AX // slot 0: digits 0..4
	VMOVQ AX, X11
	MOVQ $0x8080800908070605, AX // slot 1: digits 5..9
	VMOVQ AX, X10
	VPUNPCKLQDQ X10, X11, X11
	VINSERTI128 $1, X11, Y11, Y11
	MOVQ $0x000000511b090301, AX // weights 1, 3, 9, 27, 81
	VMOVQ AX, X13
	VPBROADCASTQ X13, Y13
	MOVL $0x00010001, AX
	VMOVD AX, X12
	VPBROADCASTD X12, Y12 // words 1, 1
	MOVQ $0x8080808080800800, AX // bytes 0 and 8 of a lane to 0 and 1
	VMOVQ AX, X10
	MOVQ $0x8080808080808080, AX
	VMOVQ AX, X9
	VPUNPCKLQDQ X9, X10, X10
	VINSERTI128 $1, X10, Y10, Y10

base20:
	VMOVDQU (SI), X0
	VINSERTI128 $1, 10(SI), Y0, Y0
	CODES
	VPSHUFB Y11, Y0, Y0
	VPMADDUBSW Y13, Y0, Y0
	VPMADDWD Y12, Y0, Y0
	VPSRLQ $32, Y0, Y1
	VPADDD Y1, Y0, Y0
	VPSHUFB Y10, Y0, Y0
	VEXTRACTI128 $1, Y0, X1
	VPUNPCKLWD X1, X0, X0
	VMOVD X0, (DI)
	ADDQ $20, SI
	ADDQ $4, DI
	SUBQ $20, CX
	JNZ  base20
	VZEROUPPER
	RET
