#include "textflag.h"

// func addAVX512(dst, x *float32, n int)
//
// dst[i] += x[i] for i < n, n a positive multiple of 16.
TEXT ·addAVX512(SB), NOSPLIT, $0-24
	MOVQ dst+0(FP), DI
	MOVQ x+8(FP), SI
	MOVQ n+16(FP), CX
add_loop64:
	CMPQ CX, $64
	JLT add_loop16
	VMOVUPS (DI), Z0
	VMOVUPS 64(DI), Z1
	VMOVUPS 128(DI), Z2
	VMOVUPS 192(DI), Z3
	VADDPS (SI), Z0, Z0
	VADDPS 64(SI), Z1, Z1
	VADDPS 128(SI), Z2, Z2
	VADDPS 192(SI), Z3, Z3
	VMOVUPS Z0, (DI)
	VMOVUPS Z1, 64(DI)
	VMOVUPS Z2, 128(DI)
	VMOVUPS Z3, 192(DI)
	ADDQ $256, DI
	ADDQ $256, SI
	SUBQ $64, CX
	JMP add_loop64
add_loop16:
	TESTQ CX, CX
	JZ add_done
	VMOVUPS (DI), Z0
	VADDPS (SI), Z0, Z0
	VMOVUPS Z0, (DI)
	ADDQ $64, DI
	ADDQ $64, SI
	SUBQ $16, CX
	JMP add_loop16
add_done:
	VZEROUPPER
	RET
