#include "textflag.h"

// func dotAVX2(a, b *int8, n int) int32
// n is a positive multiple of 32. Per 32 elements: sign-extend 16 bytes of
// each input to 16-bit lanes, VPMADDWD multiplies and adds neighbouring
// pairs into 32-bit lanes (exact: each pair sum is at most 2 × 128²), and
// two accumulators add them up; the lanes are added at the end. Integer
// addition is associative (modulo 2^32 as in the portable twin), so the
// result is DotPortable's exactly.
TEXT ·dotAVX2(SB), NOSPLIT, $0-28
	MOVQ a+0(FP), SI
	MOVQ b+8(FP), DI
	MOVQ n+16(FP), CX
	VPXOR Y0, Y0, Y0
	VPXOR Y5, Y5, Y5

loop:
	VPMOVSXBW 0(SI), Y1
	VPMOVSXBW 16(SI), Y2
	VPMOVSXBW 0(DI), Y3
	VPMOVSXBW 16(DI), Y4
	VPMADDWD Y3, Y1, Y1
	VPMADDWD Y4, Y2, Y2
	VPADDD Y1, Y0, Y0
	VPADDD Y2, Y5, Y5
	ADDQ $32, SI
	ADDQ $32, DI
	SUBQ $32, CX
	JNZ loop

	VPADDD Y5, Y0, Y0
	VEXTRACTI128 $1, Y0, X1
	VPADDD X1, X0, X0
	VPSHUFD $0x4e, X0, X1
	VPADDD X1, X0, X0
	VPSHUFD $0xb1, X0, X1
	VPADDD X1, X0, X0
	VMOVD X0, AX
	MOVL AX, ret+24(FP)
	VZEROUPPER
	RET
