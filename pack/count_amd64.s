#include "textflag.h"

// func countBits2Wide(p []byte) (pos, neg uint64, ok bool)
// Requires: AVX512F, AVX512_VPOPCNTDQ. len(p) is a multiple of 64.
TEXT ·countBits2Wide(SB), NOSPLIT, $0-41
	MOVQ p_base+0(FP), SI
	MOVQ p_len+8(FP), CX
	SHRQ $6, CX
	VPXORQ Z0, Z0, Z0 // +1 counts (low bits)
	VPXORQ Z1, Z1, Z1 // -1 counts (high bits)
	VPXORQ Z2, Z2, Z2 // any code 3
	MOVQ $0x5555555555555555, AX
	VPBROADCASTQ AX, Z3
	TESTQ CX, CX
	JZ done

loop:
	VMOVDQU64 (SI), Z4
	VPSRLQ    $1, Z4, Z5
	VPANDQ    Z3, Z4, Z6
	VPANDQ    Z3, Z5, Z7
	VPANDQ    Z6, Z7, Z8
	VPORQ     Z8, Z2, Z2
	VPOPCNTQ  Z6, Z6
	VPOPCNTQ  Z7, Z7
	VPADDQ    Z6, Z0, Z0
	VPADDQ    Z7, Z1, Z1
	ADDQ      $64, SI
	DECQ      CX
	JNZ       loop

done:
	VEXTRACTI64X4 $1, Z0, Y8
	VPADDQ        Y8, Y0, Y0
	VEXTRACTI128  $1, Y0, X8
	VPADDQ        X8, X0, X0
	VPSHUFD       $0x4e, X0, X8
	VPADDQ        X8, X0, X0
	VMOVQ         X0, AX
	MOVQ          AX, pos+24(FP)
	VEXTRACTI64X4 $1, Z1, Y8
	VPADDQ        Y8, Y1, Y1
	VEXTRACTI128  $1, Y1, X8
	VPADDQ        X8, X1, X1
	VPSHUFD       $0x4e, X1, X8
	VPADDQ        X8, X1, X1
	VMOVQ         X1, AX
	MOVQ          AX, neg+32(FP)
	VPTESTMQ      Z2, Z2, K1
	KMOVW         K1, AX
	TESTQ         AX, AX
	SETEQ         ok+40(FP)
	VZEROUPPER
	RET
