package runs

import (
	"bytes"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"reflect"
	"sort"
	"strings"
	"time"

	toml "github.com/pelletier/go-toml/v2"

	"weft/checkpoint"
	"weft/configs"
)

// SafeOnResume reports whether a run-file key may change between the
// invocations of one run without changing what has been trained: the
// budgets, the evaluation and saving cadence, the output settings, the
// thread count and the divergence guard. r is the new run.
func SafeOnResume(key string, r *configs.Run) bool {
	switch key {
	case "training.max_steps":
		// The length of the "cosine" and "linear" schedules defaults to
		// max_steps (checkResume allows it for a run planned from its
		// deadline, whose length is the plan).
		return !(r.Training.Anneals() && !r.Training.OwnDecaySteps())
	case "training.max_epochs", "training.max_tokens", "training.max_duration",
		"training.early_stop_patience", "training.threads",
		"training.divergence_factor", "training.divergence_retries", "training.divergence_lr_factor":
		return true
	}
	for _, p := range []string{"evaluation.", "checkpoint.", "output."} {
		if strings.HasPrefix(key, p) {
			return true
		}
	}
	return false
}

// ChangedKeys compares two resolved run files key by key (configs.Keys)
// and returns the keys whose values differ, sorted.
func ChangedKeys(old, cur []byte) ([]string, error) {
	var a, b map[string]any
	if err := toml.Unmarshal(old, &a); err != nil {
		return nil, fmt.Errorf("run file recorded in the checkpoint: %w", err)
	}
	if err := toml.Unmarshal(cur, &b); err != nil {
		return nil, err
	}
	lookup := func(m map[string]any, key string) any {
		sec, name, _ := strings.Cut(key, ".")
		t, ok := m[sec].(map[string]any)
		if !ok {
			return nil
		}
		return t[name]
	}
	var out []string
	for _, k := range configs.Keys() {
		if !reflect.DeepEqual(lookup(a, k), lookup(b, k)) {
			out = append(out, k)
		}
	}
	sort.Strings(out)
	return out, nil
}

// checkResume refuses a resume whose run file changed in a key that is not
// safe to change.
func checkResume(f *checkpoint.File, path string, runTOML []byte, r *configs.Run) error {
	old, ok := f.Meta[checkpoint.MetaRunConfig]
	if !ok {
		return fmt.Errorf("checkpoint %s records no run file; cannot check it belongs to this run (use --restart to start over)", path)
	}
	keys, err := ChangedKeys([]byte(old), runTOML)
	if err != nil {
		return fmt.Errorf("checkpoint %s: %w", path, err)
	}
	planned := false
	if p, err := checkpoint.ReadProgress(f); err == nil && p.PlannedSteps > 0 {
		planned = true
	}
	var unsafe []string
	for _, k := range keys {
		if !SafeOnResume(k, r) && !(planned && k == "training.max_steps") {
			unsafe = append(unsafe, k)
		}
	}
	if len(unsafe) > 0 {
		return fmt.Errorf("the run file differs from the one this run was trained with in %s, which cannot change on resume "+
			"(only budgets, evaluation, checkpoint and output settings and training.threads may); use another --run directory, or --restart to start over",
			strings.Join(unsafe, ", "))
	}
	return nil
}

// sameVocab reports whether the vocabulary a checkpoint records is the one
// prepared now (the corpus and its settings are unchanged).
func sameVocab(f *checkpoint.File, cur []byte) bool {
	return bytes.Equal([]byte(f.Meta[checkpoint.MetaVocab]), cur)
}

// MoveAside renames the run's checkpoints folder and metrics log to names
// stamped with the time now, to start the run over; it returns what it
// moved, as "old → new" base names.
func (d *Dir) MoveAside(now time.Time) ([]string, error) {
	stamp := now.Format("20060102-150405")
	var moved []string
	move := func(name, dest string) error {
		src := d.File(name)
		if _, err := os.Lstat(src); errors.Is(err, os.ErrNotExist) {
			return nil
		}
		dst := d.File(dest)
		for i := 2; ; i++ {
			if _, err := os.Lstat(dst); errors.Is(err, os.ErrNotExist) {
				break
			}
			dst = d.File(fmt.Sprintf("%s-%d", dest, i))
		}
		if err := os.Rename(src, dst); err != nil {
			return fmt.Errorf("restart: move %s aside: %w", src, unwrapPath(err))
		}
		moved = append(moved, filepath.Base(src)+" → "+filepath.Base(dst))
		return nil
	}
	if err := move(CheckpointsDir, CheckpointsDir+".old-"+stamp); err != nil {
		return moved, err
	}
	if err := move(MetricsFile, strings.TrimSuffix(MetricsFile, ".jsonl")+".old-"+stamp+".jsonl"); err != nil {
		return moved, err
	}
	return moved, nil
}
