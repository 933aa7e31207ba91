#include "textflag.h"

// func dotLanesAVX2(a, b *float32, n int, s *[32]float32)
// Per 32 elements: four products of 8 lanes (VMULPS rounds each to
// float32), each added to its accumulator (VADDPS): lane k of accumulator
// j holds the sum of elements i with i mod 32 = 8j + k, in increasing i,
// as dotBulkPortable adds them. No fused multiply-add.
TEXT ·dotLanesAVX2(SB), NOSPLIT, $0-32
	MOVQ a+0(FP), SI
	MOVQ b+8(FP), DI
	MOVQ n+16(FP), CX
	MOVQ s+24(FP), DX
	VMOVUPS 0(DX), Y0
	VMOVUPS 32(DX), Y1
	VMOVUPS 64(DX), Y2
	VMOVUPS 96(DX), Y3

loop:
	VMOVUPS 0(SI), Y4
	VMOVUPS 32(SI), Y5
	VMOVUPS 64(SI), Y6
	VMOVUPS 96(SI), Y7
	VMULPS 0(DI), Y4, Y4
	VMULPS 32(DI), Y5, Y5
	VMULPS 64(DI), Y6, Y6
	VMULPS 96(DI), Y7, Y7
	VADDPS Y4, Y0, Y0
	VADDPS Y5, Y1, Y1
	VADDPS Y6, Y2, Y2
	VADDPS Y7, Y3, Y3
	ADDQ $128, SI
	ADDQ $128, DI
	SUBQ $32, CX
	JNZ loop

	VMOVUPS Y0, 0(DX)
	VMOVUPS Y1, 32(DX)
	VMOVUPS Y2, 64(DX)
	VMOVUPS Y3, 96(DX)
	VZEROUPPER
	RET

// func dot2LanesAVX2(w, x0, x1 *float32, n int, s0, s1 *[32]float32)
// dotLanesAVX2 for two activation vectors at once, each weight loaded
// once: Y0-Y3 hold x0's lanes, Y4-Y7 x1's; each lane adds the same
// products in the same order as dotLanesAVX2 (and dotBulkPortable).
TEXT ·dot2LanesAVX2(SB), NOSPLIT, $0-48
	MOVQ w+0(FP), SI
	MOVQ x0+8(FP), DI
	MOVQ x1+16(FP), BX
	MOVQ n+24(FP), CX
	MOVQ s0+32(FP), DX
	MOVQ s1+40(FP), R8
	VMOVUPS 0(DX), Y0
	VMOVUPS 32(DX), Y1
	VMOVUPS 64(DX), Y2
	VMOVUPS 96(DX), Y3
	VMOVUPS 0(R8), Y4
	VMOVUPS 32(R8), Y5
	VMOVUPS 64(R8), Y6
	VMOVUPS 96(R8), Y7

loop2:
	VMOVUPS 0(SI), Y8
	VMOVUPS 32(SI), Y9
	VMOVUPS 64(SI), Y10
	VMOVUPS 96(SI), Y11
	VMULPS 0(DI), Y8, Y12
	VADDPS Y12, Y0, Y0
	VMULPS 32(DI), Y9, Y13
	VADDPS Y13, Y1, Y1
	VMULPS 64(DI), Y10, Y12
	VADDPS Y12, Y2, Y2
	VMULPS 96(DI), Y11, Y13
	VADDPS Y13, Y3, Y3
	VMULPS 0(BX), Y8, Y14
	VADDPS Y14, Y4, Y4
	VMULPS 32(BX), Y9, Y15
	VADDPS Y15, Y5, Y5
	VMULPS 64(BX), Y10, Y14
	VADDPS Y14, Y6, Y6
	VMULPS 96(BX), Y11, Y15
	VADDPS Y15, Y7, Y7
	ADDQ $128, SI
	ADDQ $128, DI
	ADDQ $128, BX
	SUBQ $32, CX
	JNZ loop2

	VMOVUPS Y0, 0(DX)
	VMOVUPS Y1, 32(DX)
	VMOVUPS Y2, 64(DX)
	VMOVUPS Y3, 96(DX)
	VMOVUPS Y4, 0(R8)
	VMOVUPS Y5, 32(R8)
	VMOVUPS Y6, 64(R8)
	VMOVUPS Y7, 96(R8)
	VZEROUPPER
	RET
