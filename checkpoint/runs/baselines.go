package runs

import (
	"context"
	"crypto/sha256"
	"encoding/binary"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"os"
	"path/filepath"

	"weft/data"
	"weft/eval"
)

// ManifestFile is the file of the baselines folder that says what the
// saved ladder was fitted on.
const ManifestFile = "manifest.json"

// manifestHeader is the baselines manifest's format and the version this
// weft writes. A manifest of another version, or one that differs in any
// field, makes FitBaselines refit.
var manifestHeader = data.FileHeader{Format: "weft-baselines", Version: 1}

// Manifest records what a saved baseline ladder was fitted on, so that a
// changed corpus or setting refits it.
type Manifest struct {
	data.FileHeader        // "weft-baselines", 1
	TrainSHA256     string `json:"train_sha256"` // of the training token ids, 8 bytes little-endian each
	VocabSize       int    `json:"vocabulary_size"`
	Boundary        int    `json:"boundary"`
	Settings        string `json:"settings"` // the [evaluation] keys that shape the fit, as JSON
}

// newManifest describes the ladder cfg gives on ds's training split.
func newManifest(cfg eval.Config, ds *data.Dataset) Manifest {
	return Manifest{FileHeader: manifestHeader, TrainSHA256: tokensSHA256(ds.Train.Tokens),
		VocabSize: ds.Vocab.Len(), Boundary: ds.Vocab.Boundary(), Settings: fitSettings(cfg)}
}

// ReadManifest reads the manifest of a baselines folder, checking its
// format and version.
func ReadManifest(dir string) (Manifest, error) {
	path := filepath.Join(dir, ManifestFile)
	var m Manifest
	b, err := os.ReadFile(path)
	if err != nil {
		return m, fmt.Errorf("baselines manifest: %w", err)
	}
	if err := json.Unmarshal(b, &m); err != nil {
		return m, fmt.Errorf("baselines manifest %s: %w", path, err)
	}
	return m, m.Check(path, manifestHeader, false)
}

// FitBaselines builds the ladder cfg configures on ds's training split,
// loading it from dir (a run's baselines folder; "" for none) when it was
// fitted there on the same training split with the same settings, and
// saving it there otherwise. A damaged or outdated cache is refitted, never
// trusted; note, when non-nil, hears why. progress reports the fit's
// stages.
func FitBaselines(ctx context.Context, cfg eval.Config, ds *data.Dataset, dir string, progress eval.ProgressFunc, note func(string)) (*eval.Ladder, error) {
	train := ds.Train.Tokens
	if train.Len() == 0 {
		return nil, errors.New("the training split is empty")
	}
	man := newManifest(cfg, ds)
	if dir != "" {
		if err := os.MkdirAll(dir, 0o755); err != nil {
			return nil, fmt.Errorf("baselines folder %s: %w", dir, unwrapPath(err))
		}
		if old, err := ReadManifest(dir); err == nil && old == man {
			l, err := eval.LoadLadder(dir, cfg)
			if err == nil {
				return l, nil
			}
			if note != nil {
				note(fmt.Sprintf("cached baselines unusable (%v); fitting them again", err))
			}
		}
	}
	l, err := eval.FitLadder(ctx, train, ds.Vocab.Len(), ds.Vocab.Boundary(), cfg, progress)
	if err != nil {
		return nil, err
	}
	if dir != "" {
		// The manifest goes last: a crash before it leaves a cache that
		// the next run refits.
		if err := os.Remove(filepath.Join(dir, ManifestFile)); err != nil && !errors.Is(err, os.ErrNotExist) {
			return nil, fmt.Errorf("baselines folder %s: %w", dir, unwrapPath(err))
		}
		if err := l.Save(dir); err != nil {
			return nil, err
		}
		if err := writeJSON(filepath.Join(dir, ManifestFile), man); err != nil {
			return nil, err
		}
	}
	return l, nil
}

// fitSettings are the [evaluation] keys a fitted ladder depends on; the
// n-gram memory cap in bytes, so that "1GiB" and "1024MiB" are one setting.
func fitSettings(cfg eval.Config) string {
	b, _ := json.Marshal(struct {
		Orders, Markov, HMM []int
		Smoothers           []string
		AddK, Tol           float64
		Iter, Tokens        int
		Seed                uint64
		NgramMemory         int64
	}{cfg.NgramOrders, cfg.MarkovOrders, cfg.HMMStates, cfg.NgramSmoothers, cfg.AddK, cfg.HMMTolerance,
		cfg.HMMMaxIterations, cfg.HMMMaxTokens, cfg.Seed, cfg.NgramMemoryBytes()})
	return string(b)
}

// tokensSHA256 is the SHA-256 of the ids of tokens, 8 bytes little-endian
// each, read window by window.
func tokensSHA256(tokens eval.TokenReader) string {
	const window = 1 << 16
	h := sha256.New()
	ids := make([]int, min(window, tokens.Len()))
	buf := make([]byte, 8*len(ids))
	for off := 0; off < tokens.Len(); off += window {
		w := ids[:min(window, tokens.Len()-off)]
		tokens.Read(w, off)
		for i, t := range w {
			binary.LittleEndian.PutUint64(buf[8*i:], uint64(t))
		}
		h.Write(buf[:8*len(w)])
	}
	return hex.EncodeToString(h.Sum(nil))
}
