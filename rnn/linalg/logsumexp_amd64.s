// The exponential of float64 arguments eight at a time with AVX-512, with
// the instructions and constants of Go's math.Exp on amd64
// (src/math/exp_amd64.s, its branch for CPUs with fused multiply-add,
// which every CPU with AVX-512 takes), lane by lane, in the same order:
// so every result has math.Exp's bits. That code's method is N. Shibata,
// "Efficient evaluation methods of elementary functions suitable for SIMD
// computation", ISC 2010: k = round(x·log2 e), r = (x − k·ln2)/16 with ln2
// in two parts, a Taylor polynomial of degree 8 in r, squared back four
// times as y ← y·(y + 2), then y + 1 scaled by 2^k. Registers: work in
// Z0-Z3, constants in Z16-Z31; Z15 is never touched.

//go:build amd64

#include "textflag.h"

DATA expd<>+0(SB)/8, $1.4426950408889634073599246810018920 // log2 e
DATA expd<>+8(SB)/8, $0.69314718055966295651160180568695068359375 // upper part of ln 2
DATA expd<>+16(SB)/8, $0.28235290563031577122588448175013436025525412068e-12 // lower part of ln 2
DATA expd<>+24(SB)/8, $0.0625
DATA expd<>+32(SB)/8, $2.4801587301587301587e-5
DATA expd<>+40(SB)/8, $1.9841269841269841270e-4
DATA expd<>+48(SB)/8, $1.3888888888888888889e-3
DATA expd<>+56(SB)/8, $8.3333333333333333333e-3
DATA expd<>+64(SB)/8, $4.1666666666666666667e-2
DATA expd<>+72(SB)/8, $1.6666666666666666667e-1
DATA expd<>+80(SB)/8, $0.5
DATA expd<>+88(SB)/8, $1.0
DATA expd<>+96(SB)/8, $2.0
DATA expd<>+104(SB)/8, $-708.0
DATA expd<>+112(SB)/8, $709.0
GLOBL expd<>(SB), RODATA|NOPTR, $120

// func expShift64AVX512(dst *float64, src *float32, n int, shift float64) int
//
// dst[i] = exp(float64(src[i]) − shift) for the whole groups of eight from
// the start (n is a multiple of 8), stopping before the first group with
// an argument outside [−708, 709] or NaN; returns the count done.
TEXT ·expShift64AVX512(SB), NOSPLIT, $0-40
	MOVQ dst+0(FP), DI
	MOVQ src+8(FP), SI
	MOVQ n+16(FP), CX
	VBROADCASTSD shift+24(FP), Z16
	VBROADCASTSD expd<>+0(SB), Z17
	VBROADCASTSD expd<>+8(SB), Z18
	VBROADCASTSD expd<>+16(SB), Z19
	VBROADCASTSD expd<>+24(SB), Z20
	VBROADCASTSD expd<>+32(SB), Z21
	VBROADCASTSD expd<>+40(SB), Z22
	VBROADCASTSD expd<>+48(SB), Z23
	VBROADCASTSD expd<>+56(SB), Z24
	VBROADCASTSD expd<>+64(SB), Z25
	VBROADCASTSD expd<>+72(SB), Z26
	VBROADCASTSD expd<>+80(SB), Z27
	VBROADCASTSD expd<>+88(SB), Z28
	VBROADCASTSD expd<>+96(SB), Z29
	VBROADCASTSD expd<>+104(SB), Z30
	VBROADCASTSD expd<>+112(SB), Z31
	XORQ AX, AX
es64_loop:
	CMPQ CX, $8
	JLT es64_done
	VCVTPS2PD (SI), Z0
	VSUBPD Z16, Z0, Z0
	// x ≥ −708 and x ≤ 709 (ordered: false for NaN) in every lane.
	VCMPPD $0x1d, Z30, Z0, K1
	VCMPPD $0x12, Z31, Z0, K1, K2
	KMOVW K2, BX
	CMPL BX, $0xff
	JNE es64_done
	VMULPD Z17, Z0, Z1
	VCVTPD2DQ Z1, Y2
	VCVTDQ2PD Y2, Z1
	VFNMADD231PD Z18, Z1, Z0
	VFNMADD231PD Z19, Z1, Z0
	VMULPD Z20, Z0, Z0
	VMOVAPD Z21, Z3
	VFMADD213PD Z22, Z0, Z3
	VFMADD213PD Z23, Z0, Z3
	VFMADD213PD Z24, Z0, Z3
	VFMADD213PD Z25, Z0, Z3
	VFMADD213PD Z26, Z0, Z3
	VFMADD213PD Z27, Z0, Z3
	VFMADD213PD Z28, Z0, Z3
	VMULPD Z3, Z0, Z0
	VADDPD Z29, Z0, Z3
	VMULPD Z3, Z0, Z0
	VADDPD Z29, Z0, Z3
	VMULPD Z3, Z0, Z0
	VADDPD Z29, Z0, Z3
	VMULPD Z3, Z0, Z0
	VADDPD Z29, Z0, Z3
	VFMADD213PD Z28, Z3, Z0
	// The result is a normal number in this range, so the scaling by 2^k
	// is exact, as math.Exp's multiplication by the built power of two.
	VSCALEFPD Z1, Z0, Z0
	VMOVUPD Z0, (DI)
	ADDQ $32, SI
	ADDQ $64, DI
	SUBQ $8, CX
	ADDQ $8, AX
	JMP es64_loop
es64_done:
	MOVQ AX, ret+32(FP)
	VZEROUPPER
	RET
