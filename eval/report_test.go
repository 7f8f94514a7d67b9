package eval

import (
	"bytes"
	"context"
	"encoding/json"
	"math"
	"os"
	"strings"
	"testing"
)

// TestReadReportVersion1 loads the frozen reports of version 1, written by
// weft before the format had a version (commit 721ea05): the demo's
// report, with an interpolated row and breakdowns, and a baselines-only
// report with an infinite row written as "+Inf".
func TestReadReportVersion1(t *testing.T) {
	for _, tc := range []struct {
		file, best string
		rows       int
		lambda     float64
		infRow     string
	}{
		{"testdata/eval-report-v1-demo.json", "8-gram modified_kneser_ney", 20, 0.9391127815563711, ""},
		{"testdata/eval-report-v1-baselines.json", "4-gram kneser_ney", 5, math.NaN(), "4-gram max_likelihood"},
	} {
		t.Run(tc.file, func(t *testing.T) {
			f, err := os.Open(tc.file)
			if err != nil {
				t.Fatal(err)
			}
			defer f.Close()
			c, err := ReadReport(f)
			if err != nil {
				t.Fatal(err)
			}
			if c.Split != "test" || c.BestBaseline != tc.best || len(c.Rows) != tc.rows {
				t.Errorf("got split %q, best %q, %d rows; want test, %q, %d", c.Split, c.BestBaseline, len(c.Rows), tc.best, tc.rows)
			}
			if !(c.Lambda == tc.lambda || math.IsNaN(c.Lambda) && math.IsNaN(tc.lambda)) {
				t.Errorf("λ: got %v, want %v", c.Lambda, tc.lambda)
			}
			if !math.IsNaN(c.ConfidenceLevel) {
				t.Errorf("version 1 did not record the level; got %v, want NaN", c.ConfidenceLevel)
			}
			for _, r := range c.Rows {
				if r.Model == tc.infRow && r.Kind == "ngram" {
					if !math.IsInf(r.BitsPerChar, 1) || r.ZeroProbTokens == 0 {
						t.Errorf("%s: bits/char %v with %d zero-probability tokens, want +Inf", r.Model, r.BitsPerChar, r.ZeroProbTokens)
					}
				} else if math.IsInf(r.BitsPerChar, 0) || math.IsNaN(r.BitsPerChar) {
					t.Errorf("%s: bits/char %v", r.Model, r.BitsPerChar)
				}
			}
		})
	}
}

// TestReportRoundTrip: a report written now carries its format and
// version, writes no infinity as a string, and reads back equal.
func TestReportRoundTrip(t *testing.T) {
	val := repeatTokens([]int{0, 0, 1, 2, 3, 1}, 1200)
	test := repeatTokens([]int{0, 1, 1, 2, 3, 0}, 1200)
	zero := fixedModel{"Z", "ngram", []float64{0.5, 0.5, 0, 0}} // gives 2 and 3 probability zero
	a := fixedModel{"A", "ngram", []float64{0.4, 0.3, 0.2, 0.1}}
	r := fixedModel{"R", "rnn", []float64{0.3, 0.3, 0.2, 0.2}}
	marks := make([]bool, len(test))
	for i := range marks {
		marks[i] = i%5 == 0
	}
	cmp, err := Compare(context.Background(), DefaultConfig(), CompareInput{
		Split: "test", Validation: HeldOut{Tokens: val}, Reported: HeldOut{Tokens: test},
		Models: []Entrant{{Model: r}, {Model: a}, {Model: zero}}, Unknown: -1,
		TrainCounts: []int{5, 5, 5, 5}, Marks: marks,
	})
	if err != nil {
		t.Fatal(err)
	}
	b, err := json.Marshal(cmp)
	if err != nil {
		t.Fatal(err)
	}
	s := string(b)
	if !strings.HasPrefix(s, `{"format":"weft-eval-report","version":2,`) || strings.Contains(s, "Inf") {
		t.Errorf("report: %.200s", s)
	}
	back, err := ReadReport(bytes.NewReader(b))
	if err != nil {
		t.Fatal(err)
	}
	b2, _ := json.Marshal(back)
	if string(b2) != s {
		t.Errorf("round trip changed the report:\n%s\n%s", s, b2)
	}
	var zr Result
	for _, row := range back.Rows {
		if row.Model == "Z" {
			zr = row
		}
	}
	if !math.IsInf(zr.BitsPerChar, 1) || !math.IsInf(zr.Perplexity, 1) {
		t.Errorf("infinite row after reading: %+v", zr)
	}
	if back.Lambda != cmp.Lambda || back.InterpolationPartner != "A" || back.ConfidenceLevel != 0.95 {
		t.Errorf("got λ %v partner %q level %v", back.Lambda, back.InterpolationPartner, back.ConfidenceLevel)
	}
	// Readers check the version and the format.
	for _, bad := range []string{
		strings.Replace(s, `"version":2`, `"version":3`, 1),
		strings.Replace(s, `"format":"weft-eval-report"`, `"format":"other"`, 1),
	} {
		if _, err := ReadReport(strings.NewReader(bad)); err == nil {
			t.Errorf("no error for %.60s", bad)
		}
	}
}
