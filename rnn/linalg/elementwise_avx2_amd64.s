// AVX2+FMA float32 exp, sigmoid, tanh and softmax helpers, in Go assembly
// (destination operand last), for CPUs without AVX-512. Same method and
// constants as exp32.go; 2^n is applied as two exact power-of-two factors
// 2^(n>>1)·2^(n−n>>1), so overflow gives +Inf and underflow is gradual, with
// one rounding. The functions process whole vectors of 8; the Go wrappers
// pass the last n mod 8 elements through a padded buffer. Y15 is never
// touched.

//go:build amd64

#include "textflag.h"

DATA avx2c<>+0(SB)/4, $0x3fb8aa3b
DATA avx2c<>+4(SB)/4, $0x3fb8aa3b
DATA avx2c<>+8(SB)/4, $0x3fb8aa3b
DATA avx2c<>+12(SB)/4, $0x3fb8aa3b
DATA avx2c<>+16(SB)/4, $0x3fb8aa3b
DATA avx2c<>+20(SB)/4, $0x3fb8aa3b
DATA avx2c<>+24(SB)/4, $0x3fb8aa3b
DATA avx2c<>+28(SB)/4, $0x3fb8aa3b
DATA avx2c<>+32(SB)/4, $0x3f318000
DATA avx2c<>+36(SB)/4, $0x3f318000
DATA avx2c<>+40(SB)/4, $0x3f318000
DATA avx2c<>+44(SB)/4, $0x3f318000
DATA avx2c<>+48(SB)/4, $0x3f318000
DATA avx2c<>+52(SB)/4, $0x3f318000
DATA avx2c<>+56(SB)/4, $0x3f318000
DATA avx2c<>+60(SB)/4, $0x3f318000
DATA avx2c<>+64(SB)/4, $0xb95e8083
DATA avx2c<>+68(SB)/4, $0xb95e8083
DATA avx2c<>+72(SB)/4, $0xb95e8083
DATA avx2c<>+76(SB)/4, $0xb95e8083
DATA avx2c<>+80(SB)/4, $0xb95e8083
DATA avx2c<>+84(SB)/4, $0xb95e8083
DATA avx2c<>+88(SB)/4, $0xb95e8083
DATA avx2c<>+92(SB)/4, $0xb95e8083
DATA avx2c<>+96(SB)/4, $0x39506967
DATA avx2c<>+100(SB)/4, $0x39506967
DATA avx2c<>+104(SB)/4, $0x39506967
DATA avx2c<>+108(SB)/4, $0x39506967
DATA avx2c<>+112(SB)/4, $0x39506967
DATA avx2c<>+116(SB)/4, $0x39506967
DATA avx2c<>+120(SB)/4, $0x39506967
DATA avx2c<>+124(SB)/4, $0x39506967
DATA avx2c<>+128(SB)/4, $0x3ab743ce
DATA avx2c<>+132(SB)/4, $0x3ab743ce
DATA avx2c<>+136(SB)/4, $0x3ab743ce
DATA avx2c<>+140(SB)/4, $0x3ab743ce
DATA avx2c<>+144(SB)/4, $0x3ab743ce
DATA avx2c<>+148(SB)/4, $0x3ab743ce
DATA avx2c<>+152(SB)/4, $0x3ab743ce
DATA avx2c<>+156(SB)/4, $0x3ab743ce
DATA avx2c<>+160(SB)/4, $0x3c088908
DATA avx2c<>+164(SB)/4, $0x3c088908
DATA avx2c<>+168(SB)/4, $0x3c088908
DATA avx2c<>+172(SB)/4, $0x3c088908
DATA avx2c<>+176(SB)/4, $0x3c088908
DATA avx2c<>+180(SB)/4, $0x3c088908
DATA avx2c<>+184(SB)/4, $0x3c088908
DATA avx2c<>+188(SB)/4, $0x3c088908
DATA avx2c<>+192(SB)/4, $0x3d2aa9c1
DATA avx2c<>+196(SB)/4, $0x3d2aa9c1
DATA avx2c<>+200(SB)/4, $0x3d2aa9c1
DATA avx2c<>+204(SB)/4, $0x3d2aa9c1
DATA avx2c<>+208(SB)/4, $0x3d2aa9c1
DATA avx2c<>+212(SB)/4, $0x3d2aa9c1
DATA avx2c<>+216(SB)/4, $0x3d2aa9c1
DATA avx2c<>+220(SB)/4, $0x3d2aa9c1
DATA avx2c<>+224(SB)/4, $0x3e2aaaaa
DATA avx2c<>+228(SB)/4, $0x3e2aaaaa
DATA avx2c<>+232(SB)/4, $0x3e2aaaaa
DATA avx2c<>+236(SB)/4, $0x3e2aaaaa
DATA avx2c<>+240(SB)/4, $0x3e2aaaaa
DATA avx2c<>+244(SB)/4, $0x3e2aaaaa
DATA avx2c<>+248(SB)/4, $0x3e2aaaaa
DATA avx2c<>+252(SB)/4, $0x3e2aaaaa
DATA avx2c<>+256(SB)/4, $0x3f000000
DATA avx2c<>+260(SB)/4, $0x3f000000
DATA avx2c<>+264(SB)/4, $0x3f000000
DATA avx2c<>+268(SB)/4, $0x3f000000
DATA avx2c<>+272(SB)/4, $0x3f000000
DATA avx2c<>+276(SB)/4, $0x3f000000
DATA avx2c<>+280(SB)/4, $0x3f000000
DATA avx2c<>+284(SB)/4, $0x3f000000
DATA avx2c<>+288(SB)/4, $0x3f800000
DATA avx2c<>+292(SB)/4, $0x3f800000
DATA avx2c<>+296(SB)/4, $0x3f800000
DATA avx2c<>+300(SB)/4, $0x3f800000
DATA avx2c<>+304(SB)/4, $0x3f800000
DATA avx2c<>+308(SB)/4, $0x3f800000
DATA avx2c<>+312(SB)/4, $0x3f800000
DATA avx2c<>+316(SB)/4, $0x3f800000
DATA avx2c<>+320(SB)/4, $0x42b175c3
DATA avx2c<>+324(SB)/4, $0x42b175c3
DATA avx2c<>+328(SB)/4, $0x42b175c3
DATA avx2c<>+332(SB)/4, $0x42b175c3
DATA avx2c<>+336(SB)/4, $0x42b175c3
DATA avx2c<>+340(SB)/4, $0x42b175c3
DATA avx2c<>+344(SB)/4, $0x42b175c3
DATA avx2c<>+348(SB)/4, $0x42b175c3
DATA avx2c<>+352(SB)/4, $0xc2d00000
DATA avx2c<>+356(SB)/4, $0xc2d00000
DATA avx2c<>+360(SB)/4, $0xc2d00000
DATA avx2c<>+364(SB)/4, $0xc2d00000
DATA avx2c<>+368(SB)/4, $0xc2d00000
DATA avx2c<>+372(SB)/4, $0xc2d00000
DATA avx2c<>+376(SB)/4, $0xc2d00000
DATA avx2c<>+380(SB)/4, $0xc2d00000
DATA avx2c<>+384(SB)/4, $0x80000000
DATA avx2c<>+388(SB)/4, $0x80000000
DATA avx2c<>+392(SB)/4, $0x80000000
DATA avx2c<>+396(SB)/4, $0x80000000
DATA avx2c<>+400(SB)/4, $0x80000000
DATA avx2c<>+404(SB)/4, $0x80000000
DATA avx2c<>+408(SB)/4, $0x80000000
DATA avx2c<>+412(SB)/4, $0x80000000
DATA avx2c<>+416(SB)/4, $0x7fffffff
DATA avx2c<>+420(SB)/4, $0x7fffffff
DATA avx2c<>+424(SB)/4, $0x7fffffff
DATA avx2c<>+428(SB)/4, $0x7fffffff
DATA avx2c<>+432(SB)/4, $0x7fffffff
DATA avx2c<>+436(SB)/4, $0x7fffffff
DATA avx2c<>+440(SB)/4, $0x7fffffff
DATA avx2c<>+444(SB)/4, $0x7fffffff
DATA avx2c<>+448(SB)/4, $0x40000000
DATA avx2c<>+452(SB)/4, $0x40000000
DATA avx2c<>+456(SB)/4, $0x40000000
DATA avx2c<>+460(SB)/4, $0x40000000
DATA avx2c<>+464(SB)/4, $0x40000000
DATA avx2c<>+468(SB)/4, $0x40000000
DATA avx2c<>+472(SB)/4, $0x40000000
DATA avx2c<>+476(SB)/4, $0x40000000
DATA avx2c<>+480(SB)/4, $0x3f200000
DATA avx2c<>+484(SB)/4, $0x3f200000
DATA avx2c<>+488(SB)/4, $0x3f200000
DATA avx2c<>+492(SB)/4, $0x3f200000
DATA avx2c<>+496(SB)/4, $0x3f200000
DATA avx2c<>+500(SB)/4, $0x3f200000
DATA avx2c<>+504(SB)/4, $0x3f200000
DATA avx2c<>+508(SB)/4, $0x3f200000
DATA avx2c<>+512(SB)/4, $0xbbbaf0ea
DATA avx2c<>+516(SB)/4, $0xbbbaf0ea
DATA avx2c<>+520(SB)/4, $0xbbbaf0ea
DATA avx2c<>+524(SB)/4, $0xbbbaf0ea
DATA avx2c<>+528(SB)/4, $0xbbbaf0ea
DATA avx2c<>+532(SB)/4, $0xbbbaf0ea
DATA avx2c<>+536(SB)/4, $0xbbbaf0ea
DATA avx2c<>+540(SB)/4, $0xbbbaf0ea
DATA avx2c<>+544(SB)/4, $0x3ca9134e
DATA avx2c<>+548(SB)/4, $0x3ca9134e
DATA avx2c<>+552(SB)/4, $0x3ca9134e
DATA avx2c<>+556(SB)/4, $0x3ca9134e
DATA avx2c<>+560(SB)/4, $0x3ca9134e
DATA avx2c<>+564(SB)/4, $0x3ca9134e
DATA avx2c<>+568(SB)/4, $0x3ca9134e
DATA avx2c<>+572(SB)/4, $0x3ca9134e
DATA avx2c<>+576(SB)/4, $0xbd5c1e2d
DATA avx2c<>+580(SB)/4, $0xbd5c1e2d
DATA avx2c<>+584(SB)/4, $0xbd5c1e2d
DATA avx2c<>+588(SB)/4, $0xbd5c1e2d
DATA avx2c<>+592(SB)/4, $0xbd5c1e2d
DATA avx2c<>+596(SB)/4, $0xbd5c1e2d
DATA avx2c<>+600(SB)/4, $0xbd5c1e2d
DATA avx2c<>+604(SB)/4, $0xbd5c1e2d
DATA avx2c<>+608(SB)/4, $0x3e088393
DATA avx2c<>+612(SB)/4, $0x3e088393
DATA avx2c<>+616(SB)/4, $0x3e088393
DATA avx2c<>+620(SB)/4, $0x3e088393
DATA avx2c<>+624(SB)/4, $0x3e088393
DATA avx2c<>+628(SB)/4, $0x3e088393
DATA avx2c<>+632(SB)/4, $0x3e088393
DATA avx2c<>+636(SB)/4, $0x3e088393
DATA avx2c<>+640(SB)/4, $0xbeaaaa99
DATA avx2c<>+644(SB)/4, $0xbeaaaa99
DATA avx2c<>+648(SB)/4, $0xbeaaaa99
DATA avx2c<>+652(SB)/4, $0xbeaaaa99
DATA avx2c<>+656(SB)/4, $0xbeaaaa99
DATA avx2c<>+660(SB)/4, $0xbeaaaa99
DATA avx2c<>+664(SB)/4, $0xbeaaaa99
DATA avx2c<>+668(SB)/4, $0xbeaaaa99
DATA avx2c<>+672(SB)/4, $0x0000007f
DATA avx2c<>+676(SB)/4, $0x0000007f
DATA avx2c<>+680(SB)/4, $0x0000007f
DATA avx2c<>+684(SB)/4, $0x0000007f
DATA avx2c<>+688(SB)/4, $0x0000007f
DATA avx2c<>+692(SB)/4, $0x0000007f
DATA avx2c<>+696(SB)/4, $0x0000007f
DATA avx2c<>+700(SB)/4, $0x0000007f
GLOBL avx2c<>(SB), RODATA|NOPTR, $704

// func expAVX2(dst, src *float32, n int)
//
// dst[i] = e^src[i] for i < n rounded down to a multiple of 8.
TEXT ·expAVX2(SB), NOSPLIT, $0-24
	MOVQ dst+0(FP), DI
	MOVQ src+8(FP), SI
	MOVQ n+16(FP), CX
	SHRQ $3, CX
	JZ expAVX2_done
expAVX2_loop:
	VMOVUPS (SI), Y0
	VMOVUPS avx2c<>+352(SB), Y2
	VMAXPS Y0, Y2, Y0
	VMOVUPS avx2c<>+320(SB), Y2
	VMINPS Y0, Y2, Y0
	VMULPS avx2c<>+0(SB), Y0, Y2
	VROUNDPS $0, Y2, Y2
	VMOVAPS Y0, Y3
	VFNMADD231PS avx2c<>+32(SB), Y2, Y3
	VFNMADD231PS avx2c<>+64(SB), Y2, Y3
	VMOVUPS avx2c<>+96(SB), Y4
	VFMADD213PS avx2c<>+128(SB), Y3, Y4
	VFMADD213PS avx2c<>+160(SB), Y3, Y4
	VFMADD213PS avx2c<>+192(SB), Y3, Y4
	VFMADD213PS avx2c<>+224(SB), Y3, Y4
	VFMADD213PS avx2c<>+256(SB), Y3, Y4
	VMULPS Y3, Y3, Y5
	VFMADD213PS Y3, Y5, Y4
	VADDPS avx2c<>+288(SB), Y4, Y4
	VCVTTPS2DQ Y2, Y2
	VPSRAD $1, Y2, Y5
	VPSUBD Y5, Y2, Y2
	VPADDD avx2c<>+672(SB), Y5, Y5
	VPSLLD $23, Y5, Y5
	VPADDD avx2c<>+672(SB), Y2, Y2
	VPSLLD $23, Y2, Y2
	VMULPS Y5, Y4, Y4
	VMULPS Y2, Y4, Y1
	VMOVUPS Y1, (DI)
	ADDQ $32, SI
	ADDQ $32, DI
	DECQ CX
	JNZ expAVX2_loop
	VZEROUPPER
expAVX2_done:
	RET

// func sigmoidAVX2(dst, src *float32, n int)
//
// dst[i] = 1/(1 + e^−src[i]) for i < n rounded down to a multiple of 8.
TEXT ·sigmoidAVX2(SB), NOSPLIT, $0-24
	MOVQ dst+0(FP), DI
	MOVQ src+8(FP), SI
	MOVQ n+16(FP), CX
	SHRQ $3, CX
	JZ sigmoidAVX2_done
sigmoidAVX2_loop:
	VMOVUPS (SI), Y0
	VXORPS avx2c<>+384(SB), Y0, Y0
	VMOVUPS avx2c<>+352(SB), Y2
	VMAXPS Y0, Y2, Y0
	VMOVUPS avx2c<>+320(SB), Y2
	VMINPS Y0, Y2, Y0
	VMULPS avx2c<>+0(SB), Y0, Y2
	VROUNDPS $0, Y2, Y2
	VMOVAPS Y0, Y3
	VFNMADD231PS avx2c<>+32(SB), Y2, Y3
	VFNMADD231PS avx2c<>+64(SB), Y2, Y3
	VMOVUPS avx2c<>+96(SB), Y4
	VFMADD213PS avx2c<>+128(SB), Y3, Y4
	VFMADD213PS avx2c<>+160(SB), Y3, Y4
	VFMADD213PS avx2c<>+192(SB), Y3, Y4
	VFMADD213PS avx2c<>+224(SB), Y3, Y4
	VFMADD213PS avx2c<>+256(SB), Y3, Y4
	VMULPS Y3, Y3, Y5
	VFMADD213PS Y3, Y5, Y4
	VADDPS avx2c<>+288(SB), Y4, Y4
	VCVTTPS2DQ Y2, Y2
	VPSRAD $1, Y2, Y5
	VPSUBD Y5, Y2, Y2
	VPADDD avx2c<>+672(SB), Y5, Y5
	VPSLLD $23, Y5, Y5
	VPADDD avx2c<>+672(SB), Y2, Y2
	VPSLLD $23, Y2, Y2
	VMULPS Y5, Y4, Y4
	VMULPS Y2, Y4, Y1
	VADDPS avx2c<>+288(SB), Y1, Y1
	VMOVUPS avx2c<>+288(SB), Y6
	VDIVPS Y1, Y6, Y1
	VMOVUPS Y1, (DI)
	ADDQ $32, SI
	ADDQ $32, DI
	DECQ CX
	JNZ sigmoidAVX2_loop
	VZEROUPPER
sigmoidAVX2_done:
	RET

// func tanhAVX2(dst, src *float32, n int)
//
// dst[i] = tanh(src[i]) for i < n rounded down to a multiple of 8.
TEXT ·tanhAVX2(SB), NOSPLIT, $0-24
	MOVQ dst+0(FP), DI
	MOVQ src+8(FP), SI
	MOVQ n+16(FP), CX
	SHRQ $3, CX
	JZ tanhAVX2_done
tanhAVX2_loop:
	VMOVUPS (SI), Y0
	VANDPS avx2c<>+384(SB), Y0, Y6
	VANDPS avx2c<>+416(SB), Y0, Y7
	VCMPPS $1, avx2c<>+480(SB), Y7, Y8
	VADDPS Y7, Y7, Y0
	VMOVUPS avx2c<>+352(SB), Y2
	VMAXPS Y0, Y2, Y0
	VMOVUPS avx2c<>+320(SB), Y2
	VMINPS Y0, Y2, Y0
	VMULPS avx2c<>+0(SB), Y0, Y2
	VROUNDPS $0, Y2, Y2
	VMOVAPS Y0, Y3
	VFNMADD231PS avx2c<>+32(SB), Y2, Y3
	VFNMADD231PS avx2c<>+64(SB), Y2, Y3
	VMOVUPS avx2c<>+96(SB), Y4
	VFMADD213PS avx2c<>+128(SB), Y3, Y4
	VFMADD213PS avx2c<>+160(SB), Y3, Y4
	VFMADD213PS avx2c<>+192(SB), Y3, Y4
	VFMADD213PS avx2c<>+224(SB), Y3, Y4
	VFMADD213PS avx2c<>+256(SB), Y3, Y4
	VMULPS Y3, Y3, Y5
	VFMADD213PS Y3, Y5, Y4
	VADDPS avx2c<>+288(SB), Y4, Y4
	VCVTTPS2DQ Y2, Y2
	VPSRAD $1, Y2, Y5
	VPSUBD Y5, Y2, Y2
	VPADDD avx2c<>+672(SB), Y5, Y5
	VPSLLD $23, Y5, Y5
	VPADDD avx2c<>+672(SB), Y2, Y2
	VPSLLD $23, Y2, Y2
	VMULPS Y5, Y4, Y4
	VMULPS Y2, Y4, Y1
	VADDPS avx2c<>+288(SB), Y1, Y1
	VMOVUPS avx2c<>+448(SB), Y9
	VDIVPS Y1, Y9, Y1
	VMOVUPS avx2c<>+288(SB), Y9
	VSUBPS Y1, Y9, Y1
	VMULPS Y7, Y7, Y9
	VMOVUPS avx2c<>+512(SB), Y10
	VFMADD213PS avx2c<>+544(SB), Y9, Y10
	VFMADD213PS avx2c<>+576(SB), Y9, Y10
	VFMADD213PS avx2c<>+608(SB), Y9, Y10
	VFMADD213PS avx2c<>+640(SB), Y9, Y10
	VMULPS Y9, Y7, Y11
	VFMADD213PS Y7, Y10, Y11
	VBLENDVPS Y8, Y11, Y1, Y1
	VORPS Y6, Y1, Y1
	VMOVUPS Y1, (DI)
	ADDQ $32, SI
	ADDQ $32, DI
	DECQ CX
	JNZ tanhAVX2_loop
	VZEROUPPER
tanhAVX2_done:
	RET

// func expShiftSumAVX2(dst, src *float32, n int, shift float32) float64
//
// dst[i] = e^(src[i] − shift) for i < n rounded down to a multiple of 8;
// returns their sum, accumulated in float64 (two 4-lane accumulators, then
// a fixed reduction tree).
TEXT ·expShiftSumAVX2(SB), NOSPLIT, $0-40
	MOVQ dst+0(FP), DI
	MOVQ src+8(FP), SI
	MOVQ n+16(FP), CX
	VBROADCASTSS shift+24(FP), Y14
	VXORPD Y12, Y12, Y12
	VXORPD Y13, Y13, Y13
	SHRQ $3, CX
	JZ ess2_reduce
ess2_loop:
	VMOVUPS (SI), Y0
	VSUBPS Y14, Y0, Y0
	VMOVUPS avx2c<>+352(SB), Y2
	VMAXPS Y0, Y2, Y0
	VMOVUPS avx2c<>+320(SB), Y2
	VMINPS Y0, Y2, Y0
	VMULPS avx2c<>+0(SB), Y0, Y2
	VROUNDPS $0, Y2, Y2
	VMOVAPS Y0, Y3
	VFNMADD231PS avx2c<>+32(SB), Y2, Y3
	VFNMADD231PS avx2c<>+64(SB), Y2, Y3
	VMOVUPS avx2c<>+96(SB), Y4
	VFMADD213PS avx2c<>+128(SB), Y3, Y4
	VFMADD213PS avx2c<>+160(SB), Y3, Y4
	VFMADD213PS avx2c<>+192(SB), Y3, Y4
	VFMADD213PS avx2c<>+224(SB), Y3, Y4
	VFMADD213PS avx2c<>+256(SB), Y3, Y4
	VMULPS Y3, Y3, Y5
	VFMADD213PS Y3, Y5, Y4
	VADDPS avx2c<>+288(SB), Y4, Y4
	VCVTTPS2DQ Y2, Y2
	VPSRAD $1, Y2, Y5
	VPSUBD Y5, Y2, Y2
	VPADDD avx2c<>+672(SB), Y5, Y5
	VPSLLD $23, Y5, Y5
	VPADDD avx2c<>+672(SB), Y2, Y2
	VPSLLD $23, Y2, Y2
	VMULPS Y5, Y4, Y4
	VMULPS Y2, Y4, Y1
	VMOVUPS Y1, (DI)
	VCVTPS2PD X1, Y6
	VEXTRACTF128 $1, Y1, X7
	VCVTPS2PD X7, Y7
	VADDPD Y6, Y12, Y12
	VADDPD Y7, Y13, Y13
	ADDQ $32, SI
	ADDQ $32, DI
	DECQ CX
	JNZ ess2_loop
ess2_reduce:
	VADDPD Y13, Y12, Y0
	VEXTRACTF128 $1, Y0, X1
	VADDPD X1, X0, X0
	VPERMILPD $1, X0, X1
	VADDSD X1, X0, X0
	VMOVSD X0, ret+32(FP)
	VZEROUPPER
	RET

// func maxAVX2(x *float32, n int) float32
//
// Returns the largest of x[i] for i < n rounded down to a multiple of 8
// (−Inf if none); NaNs are skipped (the accumulator is VMAXPS's second
// source in Intel order, which it returns when either is NaN).
TEXT ·maxAVX2(SB), NOSPLIT, $0-20
	MOVQ x+0(FP), SI
	MOVQ n+8(FP), CX
	MOVL $0xff800000, AX
	MOVL AX, X0
	VBROADCASTSS X0, Y0
	SHRQ $3, CX
	JZ mx2_reduce
mx2_loop:
	VMOVUPS (SI), Y1
	VMAXPS Y0, Y1, Y0
	ADDQ $32, SI
	DECQ CX
	JNZ mx2_loop
mx2_reduce:
	VEXTRACTF128 $1, Y0, X1
	VMAXPS X1, X0, X0
	VPERMILPS $0x4e, X0, X1
	VMAXPS X1, X0, X0
	VPERMILPS $0xb1, X0, X1
	VMAXPS X1, X0, X0
	VMOVSS X0, ret+16(FP)
	VZEROUPPER
	RET

// func scaleAVX2(x *float32, n int, s float32)
//
// x[i] *= s for i < n rounded down to a multiple of 8.
TEXT ·scaleAVX2(SB), NOSPLIT, $0-20
	MOVQ x+0(FP), SI
	MOVQ n+8(FP), CX
	VBROADCASTSS s+16(FP), Y0
	SHRQ $3, CX
	JZ sc2_done
sc2_loop:
	VMULPS (SI), Y0, Y1
	VMOVUPS Y1, (SI)
	ADDQ $32, SI
	DECQ CX
	JNZ sc2_loop
	VZEROUPPER
sc2_done:
	RET
