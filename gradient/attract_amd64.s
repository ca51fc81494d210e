//go:build amd64 && !purego

#include "textflag.h"

// TERMS adds the terms of the pair of entries at (DI) and (R8) to the
// sums in X4 and X5 and moves DI and R8 to the next pair.
#define TERMS \
	MOVLQSX (DI), AX \
	MOVLQSX 4(DI), BX \
	SHLQ  $4, AX \
	SHLQ  $4, BX \
	MOVUPD (SI)(AX*1), X6 \
	MOVUPD (SI)(BX*1), X7 \
	MOVAPD X6, X8 \
	UNPCKLPD X7, X8 \
	UNPCKHPD X7, X6 \
	MOVAPD X0, X9 \
	SUBPD  X8, X9 \
	MOVAPD X1, X10 \
	SUBPD  X6, X10 \
	MOVAPD X9, X11 \
	MULPD  X9, X11 \
	MOVAPD X10, X12 \
	MULPD  X10, X12 \
	ADDPD  X12, X11 \
	MULPD  X2, X11 \
	ADDPD  X3, X11 \
	MOVSD  (R8), X13 \
	CVTPS2PD X13, X13 \
	DIVPD  X11, X13 \
	MULPD  X13, X9 \
	MULPD  X13, X10 \
	ADDPD  X9, X4 \
	ADDPD  X10, X5 \
	ADDQ $8, DI \
	ADDQ $8, R8

// FETCH asks the processor to fetch the positions of the pair of entries
// R11 bytes further on than (DI) (PREFETCHT0).
#define FETCH \
	MOVLQSX (DI)(R11*1), R9 \
	MOVLQSX 4(DI)(R11*1), R10 \
	SHLQ  $4, R9 \
	SHLQ  $4, R10 \
	PREFETCHT0 (SI)(R9*1) \
	PREFETCHT0 (SI)(R10*1)

// func attractPairsSSE(y *float64, cols *int32, vals *float32, pairs, fetched, ahead, stream int, yx, yy, invA float64) (fx0, fy0, fx1, fy1 float64)
//
// The attractive sums of one row over its first 2·pairs entries, two at a
// time in the two lanes of SSE2 registers: lane 0 sums the even entries and
// lane 1 the odd ones, each term computed as attractRowGo computes it
// (dx = yx − x_j, dy = yy − y_j, s = v / (1 + (dx·dx + dy·dy)·invA),
// f += s·dx), with no fused multiply-add, so the sums have its bits.
// For the first fetched pairs it also asks the processor to fetch the
// positions of the two entries ahead bytes further on in cols
// (PREFETCHT0), and, if stream is not 0, the columns and values stream
// bytes further on as non-temporal data (PREFETCHNTA). A prefetch changes
// no result and never faults, but the columns whose positions it fetches
// must exist.
TEXT ·attractPairsSSE(SB), NOSPLIT, $0-112
	MOVQ  y+0(FP), SI
	MOVQ  cols+8(FP), DI
	MOVQ  vals+16(FP), R8
	MOVQ  pairs+24(FP), CX
	MOVQ  fetched+32(FP), DX
	MOVQ  ahead+40(FP), R11
	MOVQ  stream+48(FP), R12
	MOVSD yx+56(FP), X0
	UNPCKLPD X0, X0
	MOVSD yy+64(FP), X1
	UNPCKLPD X1, X1
	MOVSD invA+72(FP), X2
	UNPCKLPD X2, X2
	MOVQ  $0x3FF0000000000000, AX
	MOVQ  AX, X3
	UNPCKLPD X3, X3
	XORPD X4, X4
	XORPD X5, X5
	SUBQ  DX, CX
	TESTQ DX, DX
	JZ    plain
	TESTQ R12, R12
	JZ    fetching

streaming:
	FETCH
	PREFETCHNTA (DI)(R12*1)
	PREFETCHNTA (R8)(R12*1)
	TERMS
	DECQ   DX
	JNZ    streaming
	JMP    plain

fetching:
	FETCH
	TERMS
	DECQ   DX
	JNZ    fetching

plain:
	TESTQ CX, CX
	JZ    done

loop:
	TERMS
	DECQ   CX
	JNZ    loop

done:
	MOVSD X4, fx0+80(FP)
	MOVSD X5, fy0+88(FP)
	UNPCKHPD X4, X4
	UNPCKHPD X5, X5
	MOVSD X4, fx1+96(FP)
	MOVSD X5, fy1+104(FP)
	RET
