package runs

import (
	"context"
	"crypto/sha256"
	"encoding/binary"
	"encoding/hex"
	"os"
	"path/filepath"
	"testing"

	"weft/rnn/linalg"
)

// sameWeightsRecorded is the SHA-256 of the tensors of the checkpoints that
// TestSameWeightsAsBefore's runs end with, recorded by running this same
// test on the build before the token cache was memory-mapped (commit
// 722dc78, where splits held their ids as []int), for each matrix kernel
// that build chose. Reading the tokens from the mapped cache must not
// change a bit of what training computes.
var sameWeightsRecorded = map[string]map[string]string{
	"avx512": {
		"char": "72a2be762429d96f6df81617816198ad5b660505f52ff29fca13386a484745b4",
		"word": "1ddf30920ffbf1da5a65002ec4b86a620345292b95af029633eb29c6815b4fbd",
	},
}

// TestSameWeightsAsBefore trains the tiny run for 30 steps with the char
// and the lowercased word tokenizer (whose unknown and lower-cased tokens
// exercise the cache's character records) and compares the tensors of the
// checkpoint at step 30 with those the build before the mapped cache wrote.
// Only the kernel the recording machine chose (AVX-512) has a recording;
// other kernels sum in other orders.
func TestSameWeightsAsBefore(t *testing.T) {
	want, ok := sameWeightsRecorded[linalg.KernelName()]
	if !ok {
		t.Skipf("no checkpoint recorded for the %s kernel", linalg.KernelName())
	}
	for _, tok := range []string{"char", "word"} {
		t.Run(tok, func(t *testing.T) {
			dir := t.TempDir()
			r := tinyRun(t, dir)
			r.Data.Tokenizer = tok
			r.Data.Lowercase = tok == "word"
			if _, _, err := train(t, context.Background(), r, filepath.Join(dir, "run"), 30, TrainOptions{}); err != nil {
				t.Fatal(err)
			}
			sum := tensorSum(t, filepath.Join(dir, "run", "checkpoints", "step-000000030.safetensors"))
			if got := hex.EncodeToString(sum[:]); got != want[tok] {
				t.Errorf("tensors at step 30 have SHA-256 %s, the build before wrote %s", got, want[tok])
			}
		})
	}
}

// tensorSum is the SHA-256 of a safetensors file's data section: every
// tensor's bytes (the weights and the optimizer's moments), without the
// header, whose metadata records times.
func tensorSum(t *testing.T, path string) [32]byte {
	t.Helper()
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	if len(b) < 8 {
		t.Fatalf("%s: %d bytes", path, len(b))
	}
	n := binary.LittleEndian.Uint64(b)
	if n > uint64(len(b)-8) {
		t.Fatalf("%s: header of %d bytes", path, n)
	}
	return sha256.Sum256(b[8+n:])
}
