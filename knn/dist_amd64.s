//go:build amd64 && !purego

#include "textflag.h"

// REDUCE leaves (s0 + s1) + (s2 + s3) of the four lanes of acc in its lane
// 0, through X4–X6.
#define REDUCE(acc) \
	MOVAPS  acc, X4 \
	SHUFPS  $0x55, X4, X4 \
	MOVHLPS acc, X5 \
	MOVAPS  X5, X6 \
	SHUFPS  $0x55, X6, X6 \
	ADDSS   X4, acc \
	ADDSS   X6, X5 \
	ADDSS   X5, acc

// func dist2x4SSE(a, b0, b1, b2, b3 *float32, n int) (d0, d1, d2, d3 float32)
//
// Four squared distances ‖a − bᵢ‖² over n float32 values, each in the order
// of dist2: lane l of accumulator i sums the terms of positions ≡ l (mod 4)
// of the first 4⌊n/4⌋, the remaining positions are added to lane 0 one by
// one, and the lanes are combined as (s0 + s1) + (s2 + s3). Only packed and
// scalar SSE subtract, multiply and add are used (no fused multiply-add), so
// every result has the bits of dist2's pure-Go loop.
TEXT ·dist2x4SSE(SB), NOSPLIT, $0-64
	MOVQ a+0(FP), SI
	MOVQ b0+8(FP), R8
	MOVQ b1+16(FP), R9
	MOVQ b2+24(FP), R10
	MOVQ b3+32(FP), R11
	MOVQ n+40(FP), CX
	XORPS X0, X0
	XORPS X1, X1
	XORPS X2, X2
	XORPS X3, X3
	XORQ AX, AX
	MOVQ CX, DX
	SHRQ $2, DX
	JZ   tail

loop4:
	MOVUPS (SI)(AX*1), X4
	MOVAPS X4, X5
	MOVAPS X4, X6
	MOVAPS X4, X7
	MOVUPS (R8)(AX*1), X8
	MOVUPS (R9)(AX*1), X9
	MOVUPS (R10)(AX*1), X10
	MOVUPS (R11)(AX*1), X11
	SUBPS  X8, X4
	SUBPS  X9, X5
	SUBPS  X10, X6
	SUBPS  X11, X7
	MULPS  X4, X4
	MULPS  X5, X5
	MULPS  X6, X6
	MULPS  X7, X7
	ADDPS  X4, X0
	ADDPS  X5, X1
	ADDPS  X6, X2
	ADDPS  X7, X3
	ADDQ   $16, AX
	DECQ   DX
	JNZ    loop4

tail:
	ANDQ $3, CX
	JZ   reduce

loop1:
	MOVSS (SI)(AX*1), X4
	MOVAPS X4, X5
	MOVAPS X4, X6
	MOVAPS X4, X7
	MOVSS (R8)(AX*1), X8
	MOVSS (R9)(AX*1), X9
	MOVSS (R10)(AX*1), X10
	MOVSS (R11)(AX*1), X11
	SUBSS X8, X4
	SUBSS X9, X5
	SUBSS X10, X6
	SUBSS X11, X7
	MULSS X4, X4
	MULSS X5, X5
	MULSS X6, X6
	MULSS X7, X7
	ADDSS X4, X0
	ADDSS X5, X1
	ADDSS X6, X2
	ADDSS X7, X3
	ADDQ  $4, AX
	DECQ  CX
	JNZ   loop1

reduce:
	REDUCE(X0)
	MOVSS X0, d0+48(FP)
	REDUCE(X1)
	MOVSS X1, d1+52(FP)
	REDUCE(X2)
	MOVSS X2, d2+56(FP)
	REDUCE(X3)
	MOVSS X3, d3+60(FP)
	RET
