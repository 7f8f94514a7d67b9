package report

import (
	"bytes"
	"fmt"
	"html/template"
	"math"
	"sort"
	"time"

	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"

	"weft/data/atomicfile"
)

// Standing is one run's line of the comparison of several runs.
type Standing struct {
	Run        string  `json:"run"`
	State      string  `json:"state"`
	BestValBPC Number  `json:"best_val_bits_per_char"`
	BestStep   int64   `json:"best_step"`
	Split      string  `json:"split,omitempty"`
	TestBPC    Number  `json:"held_out_bits_per_char"` // the recurrent row of the comparison
	Low        Number  `json:"low"`
	High       Number  `json:"high"`
	Baseline   string  `json:"best_baseline,omitempty"`
	BaseBPC    Number  `json:"best_baseline_bits_per_char"`
	Tokens     int64   `json:"tokens"`
	Wall       float64 `json:"wall_seconds"`
}

// Standings are the runs' lines, best first: by the held-out score of the
// recurrent model, then by the best validation score (runs without one
// last).
func Standings(ds []*Data) []Standing {
	out := make([]Standing, 0, len(ds))
	for _, d := range ds {
		s := Standing{Run: d.Title, State: d.State, BestValBPC: Number(math.NaN()), TestBPC: Number(math.NaN()),
			Low: Number(math.NaN()), High: Number(math.NaN()), BaseBPC: Number(math.NaN()), Tokens: d.Facts.Tokens, Wall: d.Facts.WallSeconds}
		if d.Best != nil {
			s.BestValBPC, s.BestStep = d.Best.ValBPC, d.Best.Step
		}
		if c := d.Comparison; c != nil {
			s.Split, s.Baseline = c.Split, c.BestBaseline
			for _, r := range c.Rows {
				if r.Kind == "rnn" && math.IsNaN(float64(s.TestBPC)) {
					s.TestBPC, s.Low, s.High = Number(r.BitsPerChar), Number(r.CILow), Number(r.CIHigh)
				}
				if r.Model == c.BestBaseline {
					s.BaseBPC = Number(r.BitsPerChar)
				}
			}
		}
		out = append(out, s)
	}
	key := func(s Standing) (float64, float64) {
		a, b := float64(s.TestBPC), float64(s.BestValBPC)
		if !finite(a) {
			a = math.Inf(1)
		}
		if !finite(b) {
			b = math.Inf(1)
		}
		return a, b
	}
	sort.SliceStable(out, func(i, j int) bool {
		ai, bi := key(out[i])
		aj, bj := key(out[j])
		if ai != aj {
			return ai < aj
		}
		return bi < bj
	})
	return out
}

// CompareFigures draws the validation curves of several runs on shared
// axes, against tokens and against wall time.
func CompareFigures(ds []*Data) ([]Figure, error) {
	var figs []Figure
	for _, axis := range []struct{ id, label, title string }{
		{"compare-tokens", "tokens trained", "Validation bits per character against tokens"},
		{"compare-time", "wall time (minutes)", "Validation bits per character against wall time"},
	} {
		p := newPlot(axis.title, axis.label, "bits per character (lower is better)")
		var ss []series
		tab := Table{Head: []string{"run", "step", axis.label, "validation (bits/char)"}}
		for _, d := range ds {
			s := series{name: d.Title}
			for _, c := range d.Curve {
				if !finite(float64(c.ValBPC)) {
					continue
				}
				x := float64(c.Tokens)
				if axis.id == "compare-time" {
					x = c.WallSeconds / 60
				}
				s.xy = append(s.xy, plotter.XY{X: x, Y: float64(c.ValBPC)})
				tab.Rows = append(tab.Rows, []string{d.Title, fmt.Sprint(c.Step), fmtX(x), fmtNum(float64(c.ValBPC), 4)})
			}
			ss = append(ss, s)
		}
		if err := addLines(p, ss); err != nil {
			return nil, err
		}
		alt := fmt.Sprintf("%s, one line per run: %d runs.", axis.title, len(ds))
		figs = append(figs, Figure{ID: axis.id, Title: axis.title, Alt: alt, Table: tab, plot: p, w: 7 * vg.Inch, h: 4 * vg.Inch})
	}
	return figs, nil
}

// WriteCompare writes the page comparing the runs ds to path, atomically.
func WriteCompare(path string, ds []*Data, now time.Time) error {
	figs, err := CompareFigures(ds)
	if err != nil {
		return err
	}
	v := struct {
		AsOf      string
		Figures   []figView
		Standings []Standing
	}{AsOf: now.UTC().Format("2006-01-02 15:04:05 UTC"), Standings: Standings(ds)}
	for _, f := range figs {
		svg, err := f.Render("svg")
		if err != nil {
			return err
		}
		v.Figures = append(v.Figures, figView{Figure: f, SVG: template.HTML(inlineSVG(svg))})
	}
	var b bytes.Buffer
	if err := compareTmpl.Execute(&b, v); err != nil {
		return fmt.Errorf("comparison page: %w", err)
	}
	return atomicfile.WriteBytes(path, b.Bytes())
}

var compareTmpl = template.Must(template.Must(pageTmpl.Clone()).New("compare").Parse(`<!DOCTYPE html>
<html lang="en">
<head><meta charset="utf-8"><title>weft runs side by side</title><style>` + style + `</style></head>
<body><main>
<header class="run"><p>weft · runs side by side</p><h1>{{len .Standings}} runs</h1><p>Made {{.AsOf}}; this page does not reload.</p></header>
<section id="standings"><h2>Standings, best first</h2>
<table><thead><tr><th>run</th><th>state</th><th>held-out bits/char</th><th>interval</th><th>best baseline</th><th>best validation bits/char</th><th>at step</th><th>tokens</th><th>time</th></tr></thead><tbody>
{{range .Standings}}<tr><td>{{.Run}}</td><td>{{.State}}</td><td class="n">{{num .TestBPC 4}}{{with .Split}} ({{.}}){{end}}</td><td class="n">{{num .Low 4}} – {{num .High 4}}</td><td>{{.Baseline}} {{num .BaseBPC 4}}</td><td class="n">{{num .BestValBPC 4}}</td><td class="n">{{.BestStep}}</td><td class="n">{{.Tokens}}</td><td class="n">{{dur .Wall}}</td></tr>
{{end}}</tbody></table></section>
<section id="curves"><h2>Curves on shared axes</h2>{{range .Figures}}{{template "fig" .}}{{end}}</section>
</main></body></html>`))
