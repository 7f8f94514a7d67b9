package main

import (
	"bufio"
	"encoding/json"
	"errors"
	"fmt"
	"image/color"
	"io/fs"
	"math"
	"os"
	"strconv"
	"weft/eval"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
)

var (
	colorRNN      = color.RGBA{R: 0x1f, G: 0x6f, B: 0xb4, A: 0xff}
	colorMix      = color.RGBA{R: 0x6a, G: 0x3d, B: 0x9a, A: 0xff}
	colorBaseline = color.RGBA{R: 0x99, G: 0x99, B: 0x99, A: 0xff}
	colorBest     = color.RGBA{R: 0xd9, G: 0x5f, B: 0x02, A: 0xff}
)

// errXY is the points and intervals of a horizontal bar chart.
type errXY struct {
	plotter.XYs
	plotter.XErrors
}

// plotComparison draws bits per character of the best model of each
// family (as the table shows them by default) as horizontal bars, best at
// the top, with the bootstrap intervals as whiskers, the recurrent rows and
// the best baseline in colour.
func plotComparison(path string, cmp *comparison) error {
	shown := shownRows(cmp, false, 0)
	var rows []eval.Result
	for _, r := range shown {
		if !math.IsInf(r.BitsPerChar, 0) && !math.IsNaN(r.BitsPerChar) {
			rows = append(rows, r)
		}
	}
	if len(rows) == 0 {
		return nil
	}
	p := plot.New()
	p.Title.Text = fmt.Sprintf("Bits per character on the %s split (lower is better)", cmp.Split)
	p.X.Label.Text = "bits per character"
	if cmp.BlockChars > 0 {
		p.Title.Text += fmt.Sprintf("\nwhiskers: %s%% moving-block bootstrap intervals, blocks of %d characters",
			strconv.FormatFloat(100*cmp.ConfidenceLevel, 'g', 4, 64), cmp.BlockChars)
	} else if cmp.IntervalNote != "" {
		p.Title.Text += "\n" + cmp.IntervalNote
	}
	p.X.Min = 0
	n := len(rows)
	names := make([]string, n)
	pts := errXY{XYs: make(plotter.XYs, n), XErrors: make(plotter.XErrors, n)}
	for k, r := range rows {
		y := n - 1 - k // best at the top
		names[y] = r.Model
		pts.XYs[k] = plotter.XY{X: r.BitsPerChar, Y: float64(y)}
		if !math.IsNaN(r.CILow) && !math.IsInf(r.CILow, 0) && !math.IsInf(r.CIHigh, 0) {
			pts.XErrors[k] = struct{ Low, High float64 }{r.CILow - r.BitsPerChar, r.CIHigh - r.BitsPerChar}
		}
		val := plotter.Values{r.BitsPerChar}
		bar, err := plotter.NewBarChart(val, vg.Points(9))
		if err != nil {
			return err
		}
		bar.Horizontal = true
		bar.Offset = 0
		bar.XMin = float64(y)
		bar.LineStyle.Width = 0
		switch {
		case r.Kind == "rnn":
			bar.Color = colorRNN
		case r.Kind == "interpolated":
			bar.Color = colorMix
		case r.Model == cmp.BestBaseline:
			bar.Color = colorBest
		default:
			bar.Color = colorBaseline
		}
		p.Add(bar)
	}
	eb, err := plotter.NewXErrorBars(pts)
	if err != nil {
		return err
	}
	eb.LineStyle.Width = vg.Points(1)
	p.Add(eb)
	p.NominalY(names...)
	p.Add(plotter.NewGrid())
	// Wide enough for the longest label and title line beside a bar area
	// of 5 inches, so that no label is cut.
	w := 8 * vg.Inch
	for _, name := range names {
		w = max(w, p.Y.Tick.Label.Width(name)+6*vg.Inch)
	}
	w = max(w, p.Title.TextStyle.Width(p.Title.Text)+vg.Inch)
	h := vg.Length(n)*vg.Points(14) + 2.5*vg.Centimeter
	if err := p.Save(w, h, path); err != nil {
		return fmt.Errorf("plot %s: %w", path, err)
	}
	return nil
}

// plotLearningCurve draws the validation bits per character logged during
// training against the step, with the best baseline's validation score as
// a dashed line. A run without a metrics log draws nothing.
func plotLearningCurve(path, metricsPath string, cmp *comparison) error {
	f, err := os.Open(metricsPath)
	if errors.Is(err, fs.ErrNotExist) {
		return nil
	}
	if err != nil {
		return err
	}
	defer f.Close()
	var val, train plotter.XYs
	sc := bufio.NewScanner(f)
	sc.Buffer(make([]byte, 64<<10), 1<<20)
	for sc.Scan() {
		var m map[string]any
		if json.Unmarshal(sc.Bytes(), &m) != nil {
			continue // a line cut by a crash
		}
		step, ok := m["step"].(float64)
		if !ok {
			continue
		}
		if v, ok := m["val_bits_per_char"].(float64); ok {
			val = append(val, plotter.XY{X: step, Y: v})
		}
		if v, ok := m["train_loss"].(float64); ok && !math.IsNaN(v) && !math.IsInf(v, 0) {
			train = append(train, plotter.XY{X: step, Y: v / math.Ln2}) // nats to bits per token
		}
	}
	if len(val) == 0 && len(train) == 0 {
		return nil
	}
	p := plot.New()
	p.Title.Text = "Learning curve"
	p.X.Label.Text = "training step"
	p.Y.Label.Text = "bits (per character for validation, per token for training)"
	p.Legend.Top = true
	if len(train) > 0 {
		l, err := plotter.NewLine(train)
		if err != nil {
			return err
		}
		l.Color = colorBaseline
		p.Add(l)
		p.Legend.Add("training windows (bits per token)", l)
	}
	if len(val) > 0 {
		l, s, err := plotter.NewLinePoints(val)
		if err != nil {
			return err
		}
		l.Color, s.Color = colorRNN, colorRNN
		s.Shape = draw.CircleGlyph{}
		p.Add(l, s)
		p.Legend.Add("validation (bits per character)", l, s)
	}
	if cmp != nil && cmp.BestBaseline != "" && !math.IsNaN(cmp.BestBaselineValBPC) {
		lo, hi := 0.0, 1.0
		if len(val) > 0 {
			lo, hi = val[0].X, val[len(val)-1].X
		} else {
			lo, hi = train[0].X, train[len(train)-1].X
		}
		l, err := plotter.NewLine(plotter.XYs{{X: lo, Y: cmp.BestBaselineValBPC}, {X: hi, Y: cmp.BestBaselineValBPC}})
		if err != nil {
			return err
		}
		l.Color = colorBest
		l.Dashes = []vg.Length{vg.Points(5), vg.Points(3)}
		p.Add(l)
		p.Legend.Add(cmp.BestBaseline+" (validation)", l)
	}
	p.Add(plotter.NewGrid())
	if err := p.Save(8*vg.Inch, 4.5*vg.Inch, path); err != nil {
		return fmt.Errorf("plot %s: %w", path, err)
	}
	return nil
}
