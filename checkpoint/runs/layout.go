package runs

import (
	"path/filepath"

	"weft/data"
)

// The names inside a run directory. Every path of the layout is spelled
// here and nowhere else; the names of the files inside the checkpoints and
// baselines folders belong to the packages that write them (checkpoint,
// eval), and the vocabulary and token cache names to data.
const (
	RunFile        = "run.toml"      // the resolved run file the run trains with
	SplitFile      = "split.json"    // the split report (data.Report, versioned)
	MetricsFile    = "metrics.jsonl" // one JSON line per logged step (MetricsLine)
	CheckpointsDir = "checkpoints"   // periodic checkpoints and the best copy
	BaselinesDir   = "baselines"     // the fitted baseline ladder and its manifest
	ReportDir      = "report"        // figures written by the command line
	LockFile       = "lock"          // held by the process using the directory
)

// Layout is the root of a run directory; its methods give the path of each
// part. It does not touch the file system.
type Layout string

// File returns the path of name inside the run directory.
func (l Layout) File(name string) string { return filepath.Join(string(l), name) }

func (l Layout) RunFile() string     { return l.File(RunFile) }
func (l Layout) SplitFile() string   { return l.File(SplitFile) }
func (l Layout) Metrics() string     { return l.File(MetricsFile) }
func (l Layout) Checkpoints() string { return l.File(CheckpointsDir) }
func (l Layout) Baselines() string   { return l.File(BaselinesDir) }
func (l Layout) Report() string      { return l.File(ReportDir) }
func (l Layout) Lock() string        { return l.File(LockFile) }
func (l Layout) Vocab() string       { return l.File(data.VocabFile) }
func (l Layout) TokenCache() string  { return l.File(data.TokenCacheFile) }
