package linalg

import (
	"math"
	"math/rand/v2"
	"testing"
)

// TestGemmPacked checks that GemmPacked gives the same bits as Gemm's
// kernel on the unpacked B (which the shape tests check against the naive product), for
// both transposes of B, both of A, and 1 or 2 threads, and that a PackedB
// is reused across repacks of different shapes.
func TestGemmPacked(t *testing.T) {
	p := NewPool(2)
	defer p.Close()
	var pb PackedB
	rng := rand.New(rand.NewPCG(31, 32))
	shapes := [][3]int{{1, 1, 1}, {7, 33, 9}, {32, 1024, 256}, {33, 100, 300}, {300, 65, 257}, {8, 2100, 17}}
	for _, s := range shapes {
		for op := 0; op < 4; op++ {
			tc := gemmCase{tA: op&1 != 0, tB: op&2 != 0, m: s[0], n: s[1], k: s[2], padA: 2, padB: 3, padC: 1, alpha: -0.5, beta: 2}
			o := newOperands[float32](tc, rng)
			PackB(&pb, tc.tB, tc.k, tc.n, o.b, o.ldb)
			if pb.K() != tc.k || pb.N() != tc.n {
				t.Fatalf("PackB shape: got %dx%d want %dx%d", pb.K(), pb.N(), tc.k, tc.n)
			}
			for _, pool := range []*Pool{nil, p} {
				want := append([]float32(nil), o.c...)
				gemmRun(pool, kernel32(), tc.tA, tc.tB, tc.m, tc.n, tc.k, float32(tc.alpha), o.a, o.lda, o.b, o.ldb, float32(tc.beta), want, o.ldc)
				got := append([]float32(nil), o.c...)
				GemmPacked(pool, tc.tA, tc.m, float32(tc.alpha), o.a, o.lda, &pb, float32(tc.beta), got, o.ldc)
				for i := range got {
					if math.Float32bits(got[i]) != math.Float32bits(want[i]) {
						t.Fatalf("%v threads=%d: C[%d] got %g want %g (Gemm)", tc, pool.Threads(), i, got[i], want[i])
					}
				}
			}
		}
	}
}

func TestGemmPackedEmpty(t *testing.T) {
	defer func() {
		if recover() == nil {
			t.Fatal("GemmPacked with a zero PackedB: got no panic, want one")
		}
	}()
	GemmPacked(nil, false, 1, 1, []float32{1}, 1, &PackedB{}, 0, []float32{0}, 1)
}
