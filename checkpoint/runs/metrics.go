package runs

import (
	"bufio"
	"bytes"
	"encoding/json"
	"fmt"
	"math"
	"os"

	"weft/data/atomicfile"
)

// metricsVersion is the version of metrics.jsonl's lines. Lines without a
// version field are version 0: written before lines had one, with the same
// fields otherwise.
const metricsVersion = 1

// Number is a float that JSON writes as null when it is not finite (NaN or
// ±Inf), the one convention for non-finite numbers in every file of a run
// directory. Reading null gives NaN.
type Number float64

func (f Number) MarshalJSON() ([]byte, error) {
	if math.IsNaN(float64(f)) || math.IsInf(float64(f), 0) {
		return []byte("null"), nil
	}
	return json.Marshal(float64(f))
}

func (f *Number) UnmarshalJSON(b []byte) error {
	if string(b) == "null" {
		*f = Number(math.NaN())
		return nil
	}
	return json.Unmarshal(b, (*float64)(f))
}

// MetricsLine is one line of a run's metrics log.
type MetricsLine struct {
	Version      int     `json:"version"`
	Step         int64   `json:"step"`
	Epoch        int     `json:"epoch"`
	Tokens       int64   `json:"tokens"`
	WallSeconds  float64 `json:"wall_seconds"`
	LearningRate Number  `json:"learning_rate"`
	// TrainLoss is the token-weighted mean training loss, in nats per
	// token, of the windows since the previous line; GradNorm is the
	// gradient norm before clipping of the last window.
	TrainLoss *Number `json:"train_loss,omitempty"`
	GradNorm  *Number `json:"grad_norm,omitempty"`
	ValCE     *Number `json:"val_cross_entropy,omitempty"`
	ValPPL    *Number `json:"val_perplexity,omitempty"`
	ValBPC    *Number `json:"val_bits_per_char,omitempty"`
}

// ReadMetrics reads a metrics log. A line a crash cut short is skipped; a
// line of a newer version than this weft reads is an error.
func ReadMetrics(path string) ([]MetricsLine, error) {
	b, err := os.ReadFile(path)
	if err != nil {
		return nil, fmt.Errorf("metrics log: %w", err)
	}
	var out []MetricsLine
	sc := bufio.NewScanner(bytes.NewReader(b))
	sc.Buffer(nil, 1<<20)
	for n := 1; sc.Scan(); n++ {
		var l MetricsLine
		if json.Unmarshal(sc.Bytes(), &l) != nil {
			continue
		}
		if l.Version > metricsVersion || l.Version < 0 {
			return nil, fmt.Errorf("metrics log %s:%d: format version %d; this weft reads versions up to %d", path, n, l.Version, metricsVersion)
		}
		out = append(out, l)
	}
	return out, sc.Err()
}

// BestValidation returns the lowest validation bits per character of a
// metrics log's lines and its step; NaN and 0 when none validated.
func BestValidation(lines []MetricsLine) (best Number, step int64) {
	best = Number(math.NaN())
	for _, l := range lines {
		if l.ValBPC != nil && !math.IsNaN(float64(*l.ValBPC)) && (math.IsNaN(float64(best)) || *l.ValBPC < best) {
			best, step = *l.ValBPC, l.Step
		}
	}
	return best, step
}

// metricsLog is a metrics log open for appending.
type metricsLog struct{ f *os.File }

// openMetricsLog opens the metrics log at path for appending, first
// dropping the lines past step (written before a crash, by steps the
// resumed run trains again) and any line a crash cut short.
func openMetricsLog(path string, step int64) (*metricsLog, error) {
	if old, err := os.ReadFile(path); err == nil {
		var keep bytes.Buffer
		sc := bufio.NewScanner(bytes.NewReader(old))
		sc.Buffer(nil, 1<<20)
		for sc.Scan() {
			var l struct {
				Step *int64 `json:"step"`
			}
			if json.Unmarshal(sc.Bytes(), &l) != nil || l.Step == nil || *l.Step > step {
				continue
			}
			keep.Write(sc.Bytes())
			keep.WriteByte('\n')
		}
		if !bytes.Equal(keep.Bytes(), old) {
			if err := atomicfile.WriteBytes(path, keep.Bytes()); err != nil {
				return nil, fmt.Errorf("metrics log %s: %w", path, err)
			}
		}
	}
	f, err := os.OpenFile(path, os.O_WRONLY|os.O_CREATE|os.O_APPEND, 0o666)
	if err != nil {
		return nil, fmt.Errorf("metrics log %s: %w", path, unwrapPath(err))
	}
	return &metricsLog{f: f}, nil
}

// Append writes one line.
func (m *metricsLog) Append(l MetricsLine) error {
	b, err := json.Marshal(l)
	if err != nil {
		return err
	}
	if _, err := m.f.Write(append(b, '\n')); err != nil {
		return fmt.Errorf("metrics log %s: %w", m.f.Name(), unwrapPath(err))
	}
	return nil
}

func (m *metricsLog) Close() error {
	if err := m.f.Close(); err != nil {
		return fmt.Errorf("metrics log %s: %w", m.f.Name(), unwrapPath(err))
	}
	return nil
}
