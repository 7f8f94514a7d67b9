//go:build !amd64.v3

#include "textflag.h"

// func lstmGradsAVX512(dGates, gates, dh, dNext, dc, tc, cPrev *float32, H, n int)
//
// The loop of lstmGateGradsGo over units [0, n), n a multiple of 16 and
// positive, with the same operations in the same order, none fused.
//
// Registers: AX gates (i; f, g, o at +H, +2H, +3H floats), R12 dGates
// (same blocks), BX dh, CX dNext, DX dc, SI tc, DI cPrev, R8 H·4, R9 2H·4,
// R10 3H·4, R11 byte offset of the unit, R13 units left, R14 scratch.
TEXT ·lstmGradsAVX512(SB), NOSPLIT, $0-72
	MOVQ dGates+0(FP), R12
	MOVQ gates+8(FP), AX
	MOVQ dh+16(FP), BX
	MOVQ dNext+24(FP), CX
	MOVQ dc+32(FP), DX
	MOVQ tc+40(FP), SI
	MOVQ cPrev+48(FP), DI
	MOVQ H+56(FP), R8
	MOVQ n+64(FP), R13
	SHLQ $2, R8
	LEAQ (R8)(R8*1), R9
	LEAQ (R9)(R8*1), R10
	XORQ R11, R11
	MOVL $0x3f800000, R14
	VPBROADCASTD R14, Z31

lstm_loop:
	// Z0 gh = dh + dNext
	VMOVUPS (BX)(R11*1), Z0
	VMOVUPS (CX)(R11*1), Z1
	VADDPS Z1, Z0, Z0
	// Z1 tc, Z2 o, Z3 dc
	VMOVUPS (SI)(R11*1), Z1
	LEAQ (AX)(R10*1), R14
	VMOVUPS (R14)(R11*1), Z2
	VMOVUPS (DX)(R11*1), Z3
	// Z4 dct = dc + (gh·o)·(1 − tc·tc)
	VMULPS Z1, Z1, Z5
	VSUBPS Z5, Z31, Z5
	VMULPS Z2, Z0, Z4
	VMULPS Z5, Z4, Z4
	VADDPS Z4, Z3, Z4
	// do = ((gh·tc)·o)·(1 − o)
	VMULPS Z1, Z0, Z6
	VMULPS Z2, Z6, Z6
	VSUBPS Z2, Z31, Z7
	VMULPS Z7, Z6, Z6
	LEAQ (R12)(R10*1), R14
	VMOVUPS Z6, (R14)(R11*1)
	// Z8 i, Z9 f, Z10 g
	VMOVUPS (AX)(R11*1), Z8
	LEAQ (AX)(R8*1), R14
	VMOVUPS (R14)(R11*1), Z9
	LEAQ (AX)(R9*1), R14
	VMOVUPS (R14)(R11*1), Z10
	// di = ((dct·g)·i)·(1 − i)
	VMULPS Z10, Z4, Z11
	VMULPS Z8, Z11, Z11
	VSUBPS Z8, Z31, Z12
	VMULPS Z12, Z11, Z11
	VMOVUPS Z11, (R12)(R11*1)
	// dg = (dct·i)·(1 − g·g)
	VMULPS Z8, Z4, Z13
	VMULPS Z10, Z10, Z14
	VSUBPS Z14, Z31, Z14
	VMULPS Z14, Z13, Z13
	LEAQ (R12)(R9*1), R14
	VMOVUPS Z13, (R14)(R11*1)
	// df = ((dct·cPrev)·f)·(1 − f)
	VMOVUPS (DI)(R11*1), Z16
	VMULPS Z16, Z4, Z16
	VMULPS Z9, Z16, Z16
	VSUBPS Z9, Z31, Z17
	VMULPS Z17, Z16, Z16
	LEAQ (R12)(R8*1), R14
	VMOVUPS Z16, (R14)(R11*1)
	// dc = dct·f
	VMULPS Z9, Z4, Z18
	VMOVUPS Z18, (DX)(R11*1)
	ADDQ $64, R11
	SUBQ $16, R13
	JNZ lstm_loop
	VZEROUPPER
	RET
