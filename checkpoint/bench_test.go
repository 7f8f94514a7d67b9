package checkpoint

import (
	"math/rand/v2"
	"path/filepath"
	"testing"
)

// sink keeps benchmark results alive.
var sink any

// referenceModel returns the tensors of the reference workload's model
// (the project's reference: 1-layer LSTM, V=96, E=64, H=256; 359,520
// float32 parameters, 1.44 MB) and, with adam, the optimizer's two moment
// tensors per parameter (3x the size in all). Values come from a fixed seed.
func referenceModel(adam bool) *File {
	rng := rand.New(rand.NewPCG(1, 2))
	params := []struct {
		name  string
		shape []int
	}{
		{"model.embed", []int{96, 64}},
		{"model.lstm.0.w_ih", []int{64, 1024}},
		{"model.lstm.0.w_hh", []int{256, 1024}},
		{"model.lstm.0.b", []int{1024}},
		{"model.out.w", []int{256, 96}},
		{"model.out.b", []int{96}},
	}
	f := &File{Meta: map[string]string{"config": `{"model":{"cell":"lstm"}}`, "trainer": `{"step":1200}`}}
	add := func(name string, shape []int) {
		n, _ := numElements(shape)
		v := make([]float32, n)
		for i := range v {
			v[i] = float32(rng.NormFloat64() * 0.05)
		}
		f.Tensors = append(f.Tensors, NewFloat32(name, shape, v))
	}
	for _, p := range params {
		add(p.name, p.shape)
		if adam {
			add("optim.adam.m."+p.name, p.shape)
			add("optim.adam.v."+p.name, p.shape)
		}
	}
	return f
}

func benchFiles() []struct {
	name string
	file *File
} {
	return []struct {
		name string
		file *File
	}{
		{"params=359520/state=none", referenceModel(false)},
		{"params=359520/state=adam", referenceModel(true)},
	}
}

func fileBytes(f *File) int64 {
	b, err := Encode(f)
	if err != nil {
		panic(err)
	}
	return int64(len(b))
}

// BenchmarkSave times a complete atomic save, fsyncs included, into the
// benchmark's temporary directory (TMPDIR decides the file system).
func BenchmarkSave(b *testing.B) {
	for _, bf := range benchFiles() {
		b.Run(bf.name, func(b *testing.B) {
			p := filepath.Join(b.TempDir(), StepName(1200))
			b.SetBytes(fileBytes(bf.file))
			b.ReportAllocs()
			b.ResetTimer()
			for range b.N {
				if err := Save(p, bf.file); err != nil {
					b.Fatal(err)
				}
			}
		})
	}
}

// BenchmarkLoad times reading and verifying a saved checkpoint.
func BenchmarkLoad(b *testing.B) {
	for _, bf := range benchFiles() {
		b.Run(bf.name, func(b *testing.B) {
			p := filepath.Join(b.TempDir(), StepName(1200))
			if err := Save(p, bf.file); err != nil {
				b.Fatal(err)
			}
			b.SetBytes(fileBytes(bf.file))
			b.ReportAllocs()
			b.ResetTimer()
			for range b.N {
				f, err := Load(p)
				if err != nil {
					b.Fatal(err)
				}
				sink = f
			}
		})
	}
}

// BenchmarkEncode and BenchmarkDecode time the codec alone, in memory.
func BenchmarkEncode(b *testing.B) {
	for _, bf := range benchFiles() {
		b.Run(bf.name, func(b *testing.B) {
			b.SetBytes(fileBytes(bf.file))
			b.ReportAllocs()
			b.ResetTimer()
			for range b.N {
				out, err := Encode(bf.file)
				if err != nil {
					b.Fatal(err)
				}
				sink = out
			}
		})
	}
}

func BenchmarkDecode(b *testing.B) {
	for _, bf := range benchFiles() {
		b.Run(bf.name, func(b *testing.B) {
			data, err := Encode(bf.file)
			if err != nil {
				b.Fatal(err)
			}
			b.SetBytes(int64(len(data)))
			b.ReportAllocs()
			b.ResetTimer()
			for range b.N {
				f, err := Decode(data)
				if err != nil {
					b.Fatal(err)
				}
				sink = f
			}
		})
	}
}

// TestReferenceModelSize checks the benchmark's model against the
// parameter count of the project's reference LSTM:
// 64*1024 + 256*1024 + 1024 + 256*96 + 96 + 96*64 = 359,520.
func TestReferenceModelSize(t *testing.T) {
	n := 0
	for _, tn := range referenceModel(false).Tensors {
		n += tn.NumElements()
	}
	if want := 64*1024 + 256*1024 + 1024 + 256*96 + 96 + 96*64; n != want {
		t.Errorf("got %d parameters, want %d", n, want)
	}
}
