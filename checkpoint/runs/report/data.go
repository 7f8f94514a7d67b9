package report

import (
	"errors"
	"fmt"
	"io/fs"
	"math"
	"os"
	"path/filepath"
	"strings"
	"time"

	"weft/checkpoint"
	"weft/checkpoint/runs"
	"weft/configs"
	"weft/data"
	"weft/eval"
)

// Number is a float that JSON writes as null when it is not finite.
type Number = runs.Number

// Data is every number the page shows, figure by figure. Gather reads it
// from a run directory; the golden tests compare it, not the pixels.
type Data struct {
	Run   string `json:"run"`
	Title string `json:"title"`
	// State is "live" while training, "ended" after; Ended says how a run
	// ended, "" while live.
	State   string    `json:"state"`
	Ended   string    `json:"ended,omitempty"`
	Updated time.Time `json:"-"` // the time of the data

	Curve []CurvePoint `json:"curve"`
	// Best is the best validation point (the best checkpoint), nil before
	// the first validation.
	Best *CurvePoint `json:"best,omitempty"`
	// Reference is the best baseline's score drawn across the curves, nil
	// without a comparison.
	Reference *Reference `json:"reference,omitempty"`
	// ClipNorm is the clipping threshold (0: no clipping); Recoveries are
	// the steps at which the divergence guard restored an earlier state.
	ClipNorm   float64 `json:"clip_norm"`
	Recoveries []int64 `json:"recoveries"`

	Comparison *Comparison `json:"comparison,omitempty"`
	Surprisal  *Surprisal  `json:"surprisal,omitempty"`
	Samples    []Sample    `json:"samples,omitempty"`
	// Missing says, per section, why it is absent.
	Missing map[string]string `json:"-"`
	Facts   Facts             `json:"facts"`
}

// CurvePoint is one line of the metrics log as the curves draw it.
type CurvePoint struct {
	Step        int64   `json:"step"`
	Tokens      int64   `json:"tokens"`
	WallSeconds float64 `json:"wall_seconds"`
	// TrainBPC is the training loss in bits per character, estimated as
	// loss / ln 2 × (training tokens / training characters): exact for a
	// character model, the split's mean for others. NaN when not logged.
	TrainBPC     Number `json:"train_bits_per_char"`
	ValBPC       Number `json:"val_bits_per_char"` // NaN when not validated
	LearningRate Number `json:"learning_rate"`
	GradNorm     Number `json:"grad_norm"` // before clipping; NaN when not logged
}

// Reference is a horizontal reference line.
type Reference struct {
	Model       string  `json:"model"`
	Split       string  `json:"split"`
	BitsPerChar float64 `json:"bits_per_char"`
}

// Comparison is the comparison on a held-out split, as report/eval-*.json
// holds it, with the bars the figure draws.
type Comparison struct {
	Split        string   `json:"split"`
	BestBaseline string   `json:"best_baseline,omitempty"`
	Lambda       *float64 `json:"interpolation_weight,omitempty"`
	// BestBaselineValBPC is the best baseline's validation score, where
	// the comparison records it (NaN otherwise); IntervalNote says why the
	// intervals are shrunk or missing.
	BestBaselineValBPC float64 `json:"-"`
	IntervalNote       string  `json:"-"`
	// ScoredNote says the held-out splits were scored on their first
	// tokens only (eval's note).
	ScoredNote string `json:"scored_note,omitempty"`
	// Rows are every row, best first; Bars the best row of each kind
	// (model family), best first.
	Rows      []eval.Result `json:"rows"`
	Bars      []Bar         `json:"bars"`
	Bands     []Breakdown   `json:"frequency_bands,omitempty"`
	LongRange []Breakdown   `json:"long_range,omitempty"`
}

// Bar is one bar of the comparison figure.
type Bar struct {
	Model       string `json:"model"`
	Kind        string `json:"kind"`
	BitsPerChar Number `json:"bits_per_char"`
	Low         Number `json:"low"`
	High        Number `json:"high"`
}

// Breakdown is one model's scores on subsets of the held-out tokens.
type Breakdown struct {
	Model string           `json:"model"`
	Parts []eval.Breakdown `json:"parts"`
}

// Sample is a generated text.
type Sample struct {
	Temperature float64 `json:"temperature"`
	Seed        uint64  `json:"seed"`
	Text        string  `json:"text"`
}

// Facts are the run's facts.
type Facts struct {
	RunFile      string       `json:"-"` // the resolved run file, as saved
	Model        string       `json:"model"`
	Tokenizer    string       `json:"tokenizer"`
	Split        *data.Report `json:"split,omitempty"`
	Steps        int64        `json:"steps"`
	Tokens       int64        `json:"tokens"`
	WallSeconds  float64      `json:"wall_seconds"`
	TokensPerSec Number       `json:"tokens_per_second"`
	Checkpoints  []string     `json:"checkpoints"`
	Warnings     []string     `json:"warnings"`
}

// Missing-section keys of Data.Missing.
const (
	SectionComparison = "comparison"
	SectionSurprisal  = "surprisal"
	SectionSamples    = "samples"
	SectionCurves     = "curves"
)

// Gather reads the run directory dir into Data: everything but the
// surprisal view and the samples, which need the model and the prepared
// data (see Build). It trusts report/status.json on whether the run is
// live; see Build's Options.Held.
func Gather(dir string) (*Data, error) {
	l := runs.Layout(dir)
	d := &Data{Run: dir, Title: filepath.Base(filepath.Clean(dir)), State: "ended", Recoveries: []int64{}, Missing: map[string]string{}}
	d.Facts.Checkpoints = []string{}
	d.Facts.Warnings = []string{}
	d.Updated = time.Now()

	toml, err := os.ReadFile(l.RunFile())
	if err != nil {
		return nil, fmt.Errorf("report %s: %w (is it a run directory?)", dir, err)
	}
	d.Facts.RunFile = string(toml)
	r, err := runs.ReadRunFile(dir, nil)
	if err != nil {
		return nil, err
	}
	d.ClipNorm = r.Training.ClipNorm
	d.Facts.Model = fmt.Sprintf("%s, %d layer(s) of %d units", r.Model.Cell, r.Model.Layers, r.Model.HiddenSize)
	d.Facts.Tokenizer = r.Data.Tokenizer
	if sr, err := runs.ReadSplitReport(dir); err == nil {
		d.Facts.Split = &sr
	} else if !errors.Is(err, fs.ErrNotExist) {
		return nil, err
	}

	st, err := ReadStatus(dir)
	if err != nil {
		return nil, err
	}
	if st == nil {
		d.Ended = "how the run ended is not recorded (it was trained before weft kept a report, or its report folder was removed)"
	} else {
		d.State, d.Ended = st.State, st.Ended
		d.Updated = st.Updated
		for _, e := range st.Events {
			if e.Recovery {
				d.Recoveries = append(d.Recoveries, e.Step)
			}
			if e.Warning {
				d.Facts.Warnings = append(d.Facts.Warnings, fmt.Sprintf("step %d: %s", e.Step, e.Text))
			}
		}
	}

	lines, err := runs.ReadMetrics(l.Metrics())
	if err != nil && !errors.Is(err, fs.ErrNotExist) {
		return nil, err
	}
	charsPerToken := 1.0
	if sr := d.Facts.Split; sr != nil && sr.Train.Characters > 0 && sr.Train.Tokens > 0 {
		charsPerToken = float64(sr.Train.Characters) / float64(sr.Train.Tokens)
	}
	d.Curve = curve(lines, charsPerToken)
	if len(d.Curve) == 0 {
		d.Missing[SectionCurves] = "no metrics logged yet"
	}
	d.Best = bestPoint(d.Curve)
	if n := len(d.Curve); n > 0 {
		last := d.Curve[n-1]
		d.Facts.Steps, d.Facts.Tokens, d.Facts.WallSeconds = last.Step, last.Tokens, last.WallSeconds
		d.Facts.TokensPerSec = Number(math.NaN())
		if last.WallSeconds > 0 {
			d.Facts.TokensPerSec = Number(float64(last.Tokens) / last.WallSeconds)
		}
	}
	if ents, err := checkpoint.List(l.Checkpoints()); err == nil {
		for _, e := range ents {
			d.Facts.Checkpoints = append(d.Facts.Checkpoints, fmt.Sprintf("%s (step %d)", filepath.Base(e.Path), e.Step))
		}
		if p := checkpoint.BestPath(l.Checkpoints()); fileExists(p) {
			d.Facts.Checkpoints = append(d.Facts.Checkpoints, filepath.Base(p)+" (best validation)")
		}
	}

	d.Missing[SectionSurprisal] = "the surprisal view is drawn by 'weft report --run " + dir + "' while no other process holds the run directory"
	d.Missing[SectionSamples] = "samples are drawn by 'weft report --run " + dir + "' while no other process holds the run directory"
	cmp, err := readComparison(l.Report())
	if err != nil {
		return nil, err
	}
	if cmp == nil {
		d.Missing[SectionComparison] = "no comparison yet: once the run has a checkpoint, run 'weft eval --run " + dir + "' and then 'weft report --run " + dir + "'"
	} else {
		d.Comparison = cmp
		cmp.Bars = familyBars(cmp.Rows)
		for _, row := range cmp.Rows {
			if row.Model == cmp.BestBaseline && finite(row.BitsPerChar) {
				d.Reference = &Reference{Model: row.Model, Split: cmp.Split, BitsPerChar: row.BitsPerChar}
			}
		}
		if d.Reference != nil && finite(cmp.BestBaselineValBPC) {
			// The learning curves are on the validation split: the
			// baseline's score there is the line to beat.
			d.Reference.Split, d.Reference.BitsPerChar = "validation", cmp.BestBaselineValBPC
		}
		d.Facts.Warnings = append(d.Facts.Warnings, intervalWarnings(cmp, r)...)
	}
	return d, nil
}

// readComparison reads the newest comparison the run's report folder
// holds: report/eval-test.json, else report/eval-validation.json; nil
// when there is none. This is the one place that knows the file's shape.
func readComparison(reportDir string) (*Comparison, error) {
	for _, split := range []string{"test", "validation"} {
		path := filepath.Join(reportDir, "eval-"+split+".json")
		f, err := os.Open(path)
		if errors.Is(err, fs.ErrNotExist) {
			continue
		}
		if err != nil {
			return nil, fmt.Errorf("comparison: %w", err)
		}
		cmp, err := eval.ReadReport(f) // checks the format and version
		f.Close()
		if err != nil {
			return nil, fmt.Errorf("comparison %s: %w", path, err)
		}
		c := &Comparison{Split: cmp.Split, BestBaseline: cmp.BestBaseline, Rows: cmp.Rows, IntervalNote: cmp.IntervalNote,
			BestBaselineValBPC: cmp.BestBaselineValBPC, ScoredNote: cmp.ScoredNote}
		if c.Split == "" {
			c.Split = split
		}
		if finite(cmp.Lambda) {
			l := cmp.Lambda
			c.Lambda = &l
		}
		for _, b := range cmp.Bands {
			c.Bands = append(c.Bands, Breakdown{Model: b.Model, Parts: b.Parts})
		}
		for _, b := range cmp.LongRange {
			c.LongRange = append(c.LongRange, Breakdown{Model: b.Model, Parts: b.Parts})
		}
		return c, nil
	}
	return nil, nil
}

// curve turns metrics lines into curve points; charsPerToken converts the
// training loss per token to per character.
func curve(lines []runs.MetricsLine, charsPerToken float64) []CurvePoint {
	out := make([]CurvePoint, 0, len(lines))
	for _, l := range lines {
		p := CurvePoint{Step: l.Step, Tokens: l.Tokens, WallSeconds: l.WallSeconds, LearningRate: l.LearningRate,
			TrainBPC: Number(math.NaN()), ValBPC: Number(math.NaN()), GradNorm: Number(math.NaN())}
		if l.TrainLoss != nil {
			p.TrainBPC = Number(float64(*l.TrainLoss) / math.Ln2 / charsPerToken)
		}
		if l.ValBPC != nil {
			p.ValBPC = *l.ValBPC
		}
		if l.GradNorm != nil {
			p.GradNorm = *l.GradNorm
		}
		out = append(out, p)
	}
	return out
}

// bestPoint is the point of lowest validation bits per character, the
// earliest among equals.
func bestPoint(c []CurvePoint) *CurvePoint {
	var best *CurvePoint
	for i := range c {
		v := float64(c[i].ValBPC)
		if finite(v) && (best == nil || v < float64(best.ValBPC)) {
			p := c[i]
			best = &p
		}
	}
	return best
}

// familyBars keeps the best row of each family (eval.Family: each
// smoother's best order, the best Markov chain, HMM, recurrent and
// interpolated rows), as 'weft eval' lists them, best first, leaving out
// rows whose score is not finite.
func familyBars(rows []eval.Result) []Bar {
	var bars []Bar
	for _, r := range eval.FamilyBest(rows) {
		if finite(r.BitsPerChar) {
			bars = append(bars, Bar{Model: r.Model, Kind: r.Kind, BitsPerChar: Number(r.BitsPerChar), Low: Number(r.CILow), High: Number(r.CIHigh)})
		}
	}
	return bars
}

// intervalWarnings flags intervals that say less than they seem to: eval's
// note when a held-out split too short for eval.MinBootstrapBlocks blocks
// shrank them or left them out, and rows whose interval has collapsed to a
// point.
func intervalWarnings(c *Comparison, r *configs.Run) []string {
	var out []string
	block := r.Evaluation.BootstrapBlockChars
	switch {
	case c.IntervalNote != "": // eval.Compare's note: blocks shrunk, or no intervals
		out = append(out, c.IntervalNote)
	case len(c.Rows) > 0 && block > 0 && c.Rows[0].Characters < eval.MinBootstrapBlocks*block:
		// A comparison from before eval shrank the blocks itself.
		out = append(out, fmt.Sprintf("the %s split has %d characters, fewer than %d bootstrap blocks of %d: its intervals are too narrow to trust",
			c.Split, c.Rows[0].Characters, eval.MinBootstrapBlocks, block))
	}
	if c.ScoredNote != "" {
		out = append(out, c.ScoredNote)
	}
	var collapsed []string
	for _, row := range c.Rows {
		if finite(row.CILow) && finite(row.CIHigh) && row.CIHigh-row.CILow <= 0 {
			collapsed = append(collapsed, row.Model)
		}
	}
	if len(collapsed) > 0 {
		out = append(out, "intervals collapsed to a point for: "+strings.Join(collapsed, ", "))
	}
	return out
}

func finite(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 0) }

func fileExists(p string) bool {
	_, err := os.Stat(p)
	return err == nil
}
