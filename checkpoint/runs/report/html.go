package report

import (
	"bytes"
	"fmt"
	"html/template"
	"image/color"
	"math"
	"os"
	"path/filepath"
	"sort"
	"strings"
	"time"

	"gonum.org/v1/plot/palette"
	"gonum.org/v1/plot/palette/moreland"

	"weft/checkpoint/runs"
	"weft/data/atomicfile"
	"weft/eval"
)

// PageFile is the page's name inside the run's report folder.
const PageFile = "index.html"

// ReloadSeconds is how often a live page reloads itself.
const ReloadSeconds = 60

// Write writes the page of d and its figures (ID.svg and ID.png) into the
// report folder of the run directory dir, each file atomically.
func Write(dir string, d *Data) error { return write(dir, d, true) }

// write is Write, with the PNG files left out when pngs is false (the
// live page rewritten at every validation: rasterizing is most of the
// cost; the PNG files follow when the run ends).
func write(dir string, d *Data, pngs bool) error {
	rep := runs.Layout(dir).Report()
	if err := os.MkdirAll(rep, 0o755); err != nil {
		return fmt.Errorf("report folder: %w", err)
	}
	figs, err := Figures(d)
	if err != nil {
		return err
	}
	page, err := Page(d, figs, func(f *Figure, svg []byte) error {
		if err := atomicfile.WriteBytes(filepath.Join(rep, f.ID+".svg"), svg); err != nil {
			return err
		}
		if !pngs {
			return nil
		}
		png, err := f.Render("png")
		if err != nil {
			return err
		}
		return atomicfile.WriteBytes(filepath.Join(rep, f.ID+".png"), png)
	})
	if err != nil {
		return err
	}
	return atomicfile.WriteBytes(filepath.Join(rep, PageFile), page)
}

// PagePath is the path of the page of the run directory dir.
func PagePath(dir string) string { return filepath.Join(runs.Layout(dir).Report(), PageFile) }

type figView struct {
	Figure
	SVG template.HTML
}

type pageView struct {
	*Data
	Live    bool
	Reload  int
	AsOf    string
	Figures []figView
	Glance  [][2]string
	Shade   *shadeView
	Compare bool
	Runs    []*Data
}

// Page renders the page of d with the figures figs; save, when not nil,
// is given each figure with its SVG.
func Page(d *Data, figs []Figure, save func(f *Figure, svg []byte) error) ([]byte, error) {
	v := pageView{Data: d, Live: d.State == StateLive, Reload: ReloadSeconds, AsOf: d.Updated.UTC().Format("2006-01-02 15:04:05 UTC")}
	for _, f := range figs {
		svg, err := f.Render("svg")
		if err != nil {
			return nil, err
		}
		if save != nil {
			if err := save(&f, svg); err != nil {
				return nil, err
			}
		}
		v.Figures = append(v.Figures, figView{Figure: f, SVG: template.HTML(inlineSVG(svg))})
	}
	v.Glance = glance(d)
	if d.Surprisal != nil {
		v.Shade = shade(d.Surprisal)
	}
	var b bytes.Buffer
	if err := pageTmpl.Execute(&b, v); err != nil {
		return nil, fmt.Errorf("report page: %w", err)
	}
	return b.Bytes(), nil
}

// glance is the strip of key numbers at the top of the page.
func glance(d *Data) [][2]string {
	var g [][2]string
	if d.Best != nil {
		g = append(g, [2]string{"best validation", fmt.Sprintf("%.4f bits/char at step %d", float64(d.Best.ValBPC), d.Best.Step)})
	}
	if d.Reference != nil {
		g = append(g, [2]string{"best baseline", fmt.Sprintf("%.4f bits/char (%s, %s split)", d.Reference.BitsPerChar, d.Reference.Model, d.Reference.Split)})
	}
	if c := d.Comparison; c != nil {
		for _, r := range c.Rows {
			if r.Kind == "rnn" {
				s := fmt.Sprintf("%.4f bits/char on %s", r.BitsPerChar, c.Split)
				if finite(r.DiffBitsPerChar) && r.Reference != "" {
					s += fmt.Sprintf(", %+.4f [%+.4f, %+.4f] vs the best baseline", r.DiffBitsPerChar, r.DiffCILow, r.DiffCIHigh)
				}
				g = append(g, [2]string{"recurrent model", s})
				break
			}
		}
	}
	g = append(g, [2]string{"trained", fmt.Sprintf("%s steps, %s tokens, %s", thousands(d.Facts.Steps), thousands(d.Facts.Tokens), (time.Duration(d.Facts.WallSeconds) * time.Second).String())})
	if v := float64(d.Facts.TokensPerSec); finite(v) {
		g = append(g, [2]string{"speed", thousands(int64(math.Round(v))) + " tokens/s"})
	}
	if n := len(d.Facts.Warnings); n > 0 {
		g = append(g, [2]string{"warnings", fmt.Sprintf("%d (see the run's facts)", n)})
	}
	return g
}

// The colour scales of the surprisal view.
const (
	// bitsFloor is the least top of the bits scale; the top is the block's
	// 95th percentile of the model's bits when higher, rounded up.
	bitsFloor = 8
	// diffSpan is the half-width, in bits, of the difference scale.
	diffSpan = 4
)

type shadeView struct {
	*Surprisal
	Rows       []shadeRow
	BitsLegend []swatch
	DiffLegend []swatch
	Top        float64
}

type shadeRow struct {
	Label string
	Cells []cell
}

type cell struct {
	Text  string
	Style template.CSS
	Title string
	NL    bool
}

type swatch struct {
	Label string
	Style template.CSS
}

// shade colours the surprisal view: bits on a sequential scale from light
// (few bits) to dark (many), differences on a diverging one (blue: the
// model needs fewer bits than the baseline, red: more).
func shade(s *Surprisal) *shadeView {
	seq := moreland.BlackBody()
	seq.SetMin(0)
	seq.SetMax(1)
	div := moreland.SmoothBlueRed()
	div.SetMin(-diffSpan)
	div.SetMax(diffSpan)
	bits := make([]float64, 0, len(s.Tokens))
	for _, t := range s.Tokens {
		bits = append(bits, t.Bits)
	}
	sort.Float64s(bits)
	top := float64(bitsFloor)
	if len(bits) > 0 {
		top = max(top, math.Ceil(bits[len(bits)*95/100]))
	}
	seqStyle := func(b float64) template.CSS {
		if !finite(b) {
			return "background:#ffffff"
		}
		v := 1 - 0.92*min(max(b, 0), top)/top // light for few bits
		c := colorAt(seq, v)
		fg := "#000"
		if v < 0.5 {
			fg = "#fff"
		}
		return template.CSS("background:" + c + ";color:" + fg)
	}
	divStyle := func(x float64) template.CSS {
		if !finite(x) {
			return "background:#ffffff"
		}
		x = min(max(x, -diffSpan), diffSpan)
		fg := "#000"
		if math.Abs(x) > 0.6*diffSpan {
			fg = "#fff"
		}
		return template.CSS("background:" + colorAt(div, x) + ";color:" + fg)
	}
	v := &shadeView{Surprisal: s, Top: top}
	model := shadeRow{Label: "recurrent model: " + s.Model}
	base := shadeRow{Label: "best baseline: " + s.Baseline}
	diff := shadeRow{Label: "difference (model − baseline)"}
	for _, t := range s.Tokens {
		title := tokenTitle(t, s.Baseline)
		text, nl := t.Text, strings.HasSuffix(t.Text, "\n")
		if nl {
			text = strings.TrimSuffix(text, "\n") + "↵"
		}
		model.Cells = append(model.Cells, cell{Text: text, Style: seqStyle(t.Bits), Title: title, NL: nl})
		base.Cells = append(base.Cells, cell{Text: text, Style: seqStyle(float64(t.BaselineBits)), Title: title, NL: nl})
		diff.Cells = append(diff.Cells, cell{Text: text, Style: divStyle(t.Bits - float64(t.BaselineBits)), Title: title, NL: nl})
	}
	v.Rows = []shadeRow{model}
	if s.Baseline != "" {
		v.Rows = append(v.Rows, base, diff)
	}
	for i := 0; i <= 4; i++ {
		b := top * float64(i) / 4
		v.BitsLegend = append(v.BitsLegend, swatch{Label: fmt.Sprintf("%.0f bits", b), Style: seqStyle(b)})
	}
	for x := -diffSpan; x <= diffSpan; x += 2 {
		v.DiffLegend = append(v.DiffLegend, swatch{Label: fmt.Sprintf("%+d bits", x), Style: divStyle(float64(x))})
	}
	return v
}

func tokenTitle(t Piece, baseline string) string {
	var b strings.Builder
	fmt.Fprintf(&b, "%q: %.2f bits under the model", t.Text, t.Bits)
	if baseline != "" && finite(float64(t.BaselineBits)) {
		fmt.Fprintf(&b, ", %.2f under %s", float64(t.BaselineBits), baseline)
	}
	b.WriteString("\nthe model's top five:")
	for _, g := range t.Top {
		fmt.Fprintf(&b, "\n  %q %.1f%%", g.Text, 100*g.Prob)
	}
	return b.String()
}

func colorAt(m palette.ColorMap, v float64) string {
	c, err := m.At(v)
	if err != nil {
		return "#ffffff"
	}
	r, g, b, _ := color.RGBAModel.Convert(c).(color.RGBA).RGBA()
	return fmt.Sprintf("#%02x%02x%02x", r>>8, g>>8, b>>8)
}

// thousands writes n with commas between groups of three digits.
func thousands(n int64) string { return eval.Thousands(n) }
