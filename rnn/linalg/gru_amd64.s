//go:build !amd64.v3

#include "textflag.h"

// func gruGradsAVX512(dGates, dRec, gates, dh, dNext, hPrev, aux *float32, H, n int)
//
// The loop of gruGateGradsGo over units [0, n), n a multiple of 16 and
// positive, with the same operations in the same order, none fused. dRec
// nil means the reset-before form (no r block, no dRec).
//
// Registers: AX gates (r; z, n at +H, +2H floats), BX dGates (same
// blocks), CX dRec, DX dh, SI dNext, DI hPrev, R8 aux, R9 H·4, R10 2H·4,
// R11 byte offset of the unit, R12 units left, R13 scratch.
TEXT ·gruGradsAVX512(SB), NOSPLIT, $0-72
	MOVQ dGates+0(FP), BX
	MOVQ dRec+8(FP), CX
	MOVQ gates+16(FP), AX
	MOVQ dh+24(FP), DX
	MOVQ dNext+32(FP), SI
	MOVQ hPrev+40(FP), DI
	MOVQ aux+48(FP), R8
	MOVQ H+56(FP), R9
	MOVQ n+64(FP), R12
	SHLQ $2, R9
	LEAQ (R9)(R9*1), R10
	XORQ R11, R11
	MOVL $0x3f800000, R13
	VPBROADCASTD R13, Z31

gru_loop:
	// Z0 gh = dh + dNext
	VMOVUPS (DX)(R11*1), Z0
	VMOVUPS (SI)(R11*1), Z1
	VADDPS Z1, Z0, Z0
	// Z1 z, Z2 n
	LEAQ (AX)(R9*1), R13
	VMOVUPS (R13)(R11*1), Z1
	LEAQ (AX)(R10*1), R13
	VMOVUPS (R13)(R11*1), Z2
	// Z3 dnp = (gh·(1 − z))·(1 − n·n)
	VSUBPS Z1, Z31, Z4
	VMULPS Z4, Z0, Z3
	VMULPS Z2, Z2, Z5
	VSUBPS Z5, Z31, Z5
	VMULPS Z5, Z3, Z3
	// Z6 dz = ((gh·(hPrev − n))·z)·(1 − z)
	VMOVUPS (DI)(R11*1), Z6
	VSUBPS Z2, Z6, Z6
	VMULPS Z6, Z0, Z6
	VMULPS Z1, Z6, Z6
	VMULPS Z4, Z6, Z6
	LEAQ (BX)(R9*1), R13
	VMOVUPS Z6, (R13)(R11*1)
	// dn = dnp
	LEAQ (BX)(R10*1), R13
	VMOVUPS Z3, (R13)(R11*1)
	// dNext = gh·z
	VMULPS Z1, Z0, Z7
	VMOVUPS Z7, (SI)(R11*1)
	TESTQ CX, CX
	JZ gru_next
	// Z8 r; dr = ((dnp·u)·r)·(1 − r)
	VMOVUPS (AX)(R11*1), Z8
	VMOVUPS (R8)(R11*1), Z9
	VMULPS Z9, Z3, Z9
	VMULPS Z8, Z9, Z9
	VSUBPS Z8, Z31, Z10
	VMULPS Z10, Z9, Z9
	VMOVUPS Z9, (BX)(R11*1)
	// dRec = (dr, dz, dnp·r)
	VMOVUPS Z9, (CX)(R11*1)
	LEAQ (CX)(R9*1), R13
	VMOVUPS Z6, (R13)(R11*1)
	VMULPS Z8, Z3, Z11
	LEAQ (CX)(R10*1), R13
	VMOVUPS Z11, (R13)(R11*1)
gru_next:
	ADDQ $64, R11
	SUBQ $16, R12
	JNZ gru_loop
	VZEROUPPER
	RET
