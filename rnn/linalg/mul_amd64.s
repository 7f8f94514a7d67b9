// AVX-512 elementwise products for the LSTM cell: every operation rounded
// on its own (no fused multiply-add), as the Go loops of mul.go. n is a
// multiple of 16.

//go:build amd64

#include "textflag.h"

// func mulAVX512(dst, a, b *float32, n int)
TEXT ·mulAVX512(SB), NOSPLIT, $0-32
	MOVQ dst+0(FP), DI
	MOVQ a+8(FP), SI
	MOVQ b+16(FP), DX
	MOVQ n+24(FP), CX
	XORQ AX, AX
mul_loop:
	CMPQ CX, $16
	JLT mul_done
	VMOVUPS (SI)(AX*1), Z0
	VMULPS (DX)(AX*1), Z0, Z0
	VMOVUPS Z0, (DI)(AX*1)
	ADDQ $64, AX
	SUBQ $16, CX
	JMP mul_loop
mul_done:
	VZEROUPPER
	RET

// func mulAddMulAVX512(dst, a, b, c, d *float32, n int)
TEXT ·mulAddMulAVX512(SB), NOSPLIT, $0-48
	MOVQ dst+0(FP), DI
	MOVQ a+8(FP), SI
	MOVQ b+16(FP), DX
	MOVQ c+24(FP), R8
	MOVQ d+32(FP), R9
	MOVQ n+40(FP), CX
	XORQ AX, AX
mam_loop:
	CMPQ CX, $16
	JLT mam_done
	VMOVUPS (SI)(AX*1), Z0
	VMULPS (DX)(AX*1), Z0, Z0
	VMOVUPS (R8)(AX*1), Z1
	VMULPS (R9)(AX*1), Z1, Z1
	VADDPS Z1, Z0, Z0
	VMOVUPS Z0, (DI)(AX*1)
	ADDQ $64, AX
	SUBQ $16, CX
	JMP mam_loop
mam_done:
	VZEROUPPER
	RET
