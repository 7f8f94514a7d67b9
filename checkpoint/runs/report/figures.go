package report

import (
	"bytes"
	"fmt"
	"image/color"
	"math"
	"regexp"
	"strconv"
	"strings"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
)

// The colour-blind-safe set of Okabe and Ito (2008), "Color Universal
// Design": blue, vermillion, bluish green, orange, reddish purple, sky
// blue, black.
var okabeIto = []color.RGBA{
	{0x00, 0x72, 0xb2, 0xff},
	{0xd5, 0x5e, 0x00, 0xff},
	{0x00, 0x9e, 0x73, 0xff},
	{0xe6, 0x9f, 0x00, 0xff},
	{0xcc, 0x79, 0xa7, 0xff},
	{0x56, 0xb4, 0xe9, 0xff},
	{0x00, 0x00, 0x00, 0xff},
}

// dashes tell the series apart in grey print.
var dashes = [][]vg.Length{nil, {vg.Points(6), vg.Points(3)}, {vg.Points(2), vg.Points(2)}, {vg.Points(8), vg.Points(2), vg.Points(2), vg.Points(2)}}

var glyphs = []draw.GlyphDrawer{draw.CircleGlyph{}, draw.SquareGlyph{}, draw.TriangleGlyph{}, draw.PyramidGlyph{}, draw.CrossGlyph{}, draw.PlusGlyph{}, draw.RingGlyph{}}

// Figure is one figure of the page: its plot, a text alternative and the
// numbers behind it.
type Figure struct {
	ID    string
	Title string
	Alt   string
	Table Table
	plot  *plot.Plot
	w, h  vg.Length
}

// Table is a figure's numbers.
type Table struct {
	Head []string
	Rows [][]string
}

// series is one line of a figure.
type series struct {
	name string
	xy   plotter.XYs
}

// maxMarked is the most points a line draws with markers.
const maxMarked = 60

// curveHeadroom sets the top of a learning curve's axis: this many times
// the highest of the first validation score and the reference, so that
// the first steps of training (often several times higher) do not squash
// the part a reader compares.
const curveHeadroom = 1.5

// plainTicks are gonum's default ticks labelled as plain numbers: whole
// ones with thousands separators, others as short as they can be.
type plainTicks struct{}

func (plainTicks) Ticks(lo, hi float64) []plot.Tick {
	ts := plot.DefaultTicks{}.Ticks(lo, hi)
	for i := range ts {
		if ts[i].Label == "" {
			continue
		}
		if v := ts[i].Value; v == math.Trunc(v) && math.Abs(v) < 1e15 {
			ts[i].Label = thousands(int64(v))
		} else {
			ts[i].Label = strconv.FormatFloat(v, 'g', -1, 64)
		}
	}
	return ts
}

func newPlot(title, x, y string) *plot.Plot {
	p := plot.New()
	p.X.Tick.Marker = plainTicks{}
	p.Y.Tick.Marker = plainTicks{}
	p.Legend.TextStyle.Font.Size = vg.Points(10)
	p.Title.Text = title
	p.X.Label.Text = x
	p.Y.Label.Text = y
	p.Legend.Top = true
	p.Add(plotter.NewGrid())
	return p
}

// addLines draws each series with its own colour, dash and marker.
func addLines(p *plot.Plot, ss []series) error {
	for i, s := range ss {
		if len(s.xy) == 0 {
			continue
		}
		l, pts, err := plotter.NewLinePoints(s.xy)
		if err != nil {
			return err
		}
		c := okabeIto[i%len(okabeIto)]
		l.Color, pts.Color = c, c
		l.Dashes = dashes[i%len(dashes)]
		pts.Shape = glyphs[i%len(glyphs)]
		pts.Radius = vg.Points(2)
		if len(s.xy) > maxMarked {
			pts.Radius = 0 // a dense line reads better bare; its dash tells it apart
		}
		l.Width = vg.Points(1.5)
		p.Add(l, pts)
		p.Legend.Add(s.name, l, pts)
	}
	return nil
}

// hline draws a dashed horizontal reference from x0 to x1.
func hline(p *plot.Plot, name string, y, x0, x1 float64) error {
	if x1 <= x0 {
		x1 = x0 + 1
	}
	l, err := plotter.NewLine(plotter.XYs{{X: x0, Y: y}, {X: x1, Y: y}})
	if err != nil {
		return err
	}
	l.Color = okabeIto[6]
	l.Dashes = []vg.Length{vg.Points(3), vg.Points(3)}
	l.Width = vg.Points(1)
	p.Add(l)
	p.Legend.Add(name, l)
	return nil
}

// marker draws one large ring at (x, y).
func marker(p *plot.Plot, name string, x, y float64) error {
	s, err := plotter.NewScatter(plotter.XYs{{X: x, Y: y}})
	if err != nil {
		return err
	}
	s.Shape = draw.RingGlyph{}
	s.Radius = vg.Points(7)
	s.Color = okabeIto[1]
	p.Add(s)
	p.Legend.Add(name, s)
	return nil
}

// CurveFigures draws the learning curves against tokens and against wall
// time, and the learning rate and gradient norm against steps.
func CurveFigures(d *Data) ([]Figure, error) {
	if len(d.Curve) == 0 {
		return nil, nil
	}
	var figs []Figure
	for _, axis := range []struct{ id, label string }{{"curve-tokens", "tokens trained"}, {"curve-time", "wall time (minutes)"}} {
		x := func(c CurvePoint) float64 {
			if axis.id == "curve-time" {
				return c.WallSeconds / 60
			}
			return float64(c.Tokens)
		}
		var train, val plotter.XYs
		tab := Table{Head: []string{axis.label, "step", "training (bits/char, estimated)", "validation (bits/char)"}}
		for _, c := range d.Curve {
			if finite(float64(c.TrainBPC)) {
				train = append(train, plotter.XY{X: x(c), Y: float64(c.TrainBPC)})
			}
			if finite(float64(c.ValBPC)) {
				val = append(val, plotter.XY{X: x(c), Y: float64(c.ValBPC)})
			}
			if finite(float64(c.ValBPC)) || finite(float64(c.TrainBPC)) {
				tab.Rows = append(tab.Rows, []string{fmtX(x(c)), fmt.Sprint(c.Step), fmtNum(float64(c.TrainBPC), 4), fmtNum(float64(c.ValBPC), 4)})
			}
		}
		title := "Learning curve against tokens"
		if axis.id == "curve-time" {
			title = "Learning curve against wall time"
		}
		p := newPlot(title, axis.label, "bits per character (lower is better)")
		if err := addLines(p, []series{{"training windows", train}, {"validation", val}}); err != nil {
			return nil, err
		}
		x0, x1 := x(d.Curve[0]), x(d.Curve[len(d.Curve)-1])
		alt := fmt.Sprintf("%s: %d logged points from %s to %s.", title, len(d.Curve), fmtX(x0), fmtX(x1))
		if top, ok := curveTop(d, train); ok {
			p.Y.Max = top
			alt += fmt.Sprintf(" The axis stops at %.2f bits per character; the earlier training points above it are in the table.", top)
		}
		if d.Reference != nil {
			if err := hline(p, fmt.Sprintf("best baseline: %s (%s split)", d.Reference.Model, d.Reference.Split), d.Reference.BitsPerChar, x0, x1); err != nil {
				return nil, err
			}
			alt += fmt.Sprintf(" The best baseline, %s, scores %.4f bits per character on the %s split.", d.Reference.Model, d.Reference.BitsPerChar, d.Reference.Split)
		}
		if d.Best != nil {
			if err := marker(p, fmt.Sprintf("best checkpoint (step %d)", d.Best.Step), x(*d.Best), float64(d.Best.ValBPC)); err != nil {
				return nil, err
			}
			alt += fmt.Sprintf(" The best validation score, %.4f bits per character, is at step %d.", float64(d.Best.ValBPC), d.Best.Step)
		}
		figs = append(figs, Figure{ID: axis.id, Title: title, Alt: alt, Table: tab, plot: p, w: 7 * vg.Inch, h: 4 * vg.Inch})
	}

	// The learning rate and the gradient norm, log scale.
	var lr, gn plotter.XYs
	tab := Table{Head: []string{"step", "learning rate", "gradient norm before clipping"}}
	for _, c := range d.Curve {
		if v := float64(c.LearningRate); finite(v) && v > 0 {
			lr = append(lr, plotter.XY{X: float64(c.Step), Y: v})
		}
		if v := float64(c.GradNorm); finite(v) && v > 0 {
			gn = append(gn, plotter.XY{X: float64(c.Step), Y: v})
		}
		tab.Rows = append(tab.Rows, []string{fmt.Sprint(c.Step), fmtNum(float64(c.LearningRate), 6), fmtNum(float64(c.GradNorm), 4)})
	}
	x0, x1 := float64(d.Curve[0].Step), float64(d.Curve[len(d.Curve)-1].Step)
	for _, f := range []struct {
		id, title, y string
		xy           plotter.XYs
	}{
		{"learning-rate", "Learning rate", "learning rate (log scale)", lr},
		{"grad-norm", "Gradient norm before clipping", "L2 norm (log scale)", gn},
	} {
		if len(f.xy) == 0 {
			continue
		}
		p := newPlot(f.title, "training step", f.y)
		p.Y.Scale = plot.LogScale{}
		p.Y.Tick.Marker = plot.LogTicks{Prec: -1}
		lo, hi := yRange(f.xy, 0)
		dataLo, dataHi := lo, hi
		if f.id == "grad-norm" && d.ClipNorm > 0 {
			lo, hi = min(lo, d.ClipNorm), max(hi, d.ClipNorm)
		}
		// Whole decades: a flat line (a constant rate) would otherwise get
		// an axis reaching zero, which a log scale cannot draw, or no tick.
		p.Y.Min, p.Y.Max = math.Pow(10, math.Floor(math.Log10(lo))), math.Pow(10, math.Ceil(math.Log10(hi*1.01)))
		if err := addLines(p, []series{{f.title, f.xy}}); err != nil {
			return nil, err
		}
		alt := fmt.Sprintf("%s against the training step, %d points, log scale, from %.3g to %.3g.", f.title, len(f.xy), dataLo, dataHi)
		if f.id == "grad-norm" {
			if d.ClipNorm > 0 {
				if err := hline(p, fmt.Sprintf("clipping threshold %g", d.ClipNorm), d.ClipNorm, x0, x1); err != nil {
					return nil, err
				}
				alt += fmt.Sprintf(" Norms above the threshold %g were clipped to it.", d.ClipNorm)
			}
			lo, hi := yRange(f.xy, d.ClipNorm)
			var first *plotter.Line
			for _, st := range d.Recoveries {
				l, err := plotter.NewLine(plotter.XYs{{X: float64(st), Y: lo}, {X: float64(st), Y: hi}})
				if err != nil {
					return nil, err
				}
				l.Color, l.Width = okabeIto[1], vg.Points(2)
				l.Dashes = []vg.Length{vg.Points(1), vg.Points(2)}
				p.Add(l)
				if first == nil {
					first = l
				}
			}
			if first != nil {
				p.Legend.Add("divergence recovery", first)
				alt += fmt.Sprintf(" The divergence guard restored an earlier state %d time(s), at steps %v.", len(d.Recoveries), d.Recoveries)
			} else {
				alt += " There was no divergence recovery."
			}
		}
		figs = append(figs, Figure{ID: f.id, Title: f.title, Alt: alt, Table: tab, plot: p, w: 7 * vg.Inch, h: 3.5 * vg.Inch})
	}
	return figs, nil
}

// curveTop is the top of a learning curve's axis when some training
// points lie far above the validation scores (see curveHeadroom).
func curveTop(d *Data, train plotter.XYs) (float64, bool) {
	ref := math.NaN()
	for _, c := range d.Curve {
		if v := float64(c.ValBPC); finite(v) {
			ref = v
			break
		}
	}
	if math.IsNaN(ref) {
		return 0, false
	}
	if d.Reference != nil {
		ref = max(ref, d.Reference.BitsPerChar)
	}
	top := curveHeadroom * ref
	for _, p := range train {
		if p.Y > top {
			return top, true
		}
	}
	return 0, false
}

func yRange(xy plotter.XYs, also float64) (lo, hi float64) {
	lo, hi = math.Inf(1), math.Inf(-1)
	for _, p := range xy {
		lo, hi = min(lo, p.Y), max(hi, p.Y)
	}
	if also > 0 {
		lo, hi = min(lo, also), max(hi, also)
	}
	return lo, hi
}

// ComparisonFigure draws the best row of each model family as a bar with
// its interval, best at the top.
func ComparisonFigure(c *Comparison) (*Figure, error) {
	if c == nil || len(c.Bars) == 0 {
		return nil, nil
	}
	p := newPlot(fmt.Sprintf("Bits per character on the %s split, best of each family", c.Split), "bits per character (lower is better)", "")
	p.X.Min = 0
	n := len(c.Bars)
	names := make([]string, n)
	var pts errXY
	for k, b := range c.Bars {
		y := n - 1 - k
		names[y] = b.Model
		bar, err := plotter.NewBarChart(plotter.Values{float64(b.BitsPerChar)}, vg.Points(14))
		if err != nil {
			return nil, err
		}
		bar.Horizontal, bar.XMin = true, float64(y)
		bar.Color = kindColor(b.Kind)
		bar.LineStyle.Width = vg.Points(0.5)
		p.Add(bar)
		if finite(float64(b.Low)) && finite(float64(b.High)) {
			pts.XYs = append(pts.XYs, plotter.XY{X: float64(b.BitsPerChar), Y: float64(y)})
			pts.XErrors = append(pts.XErrors, struct{ Low, High float64 }{float64(b.Low - b.BitsPerChar), float64(b.High - b.BitsPerChar)})
		}
	}
	if len(pts.XYs) > 0 {
		eb, err := plotter.NewXErrorBars(pts)
		if err != nil {
			return nil, err
		}
		eb.LineStyle.Width = vg.Points(1.5)
		eb.CapWidth = vg.Points(8)
		p.Add(eb)
	}
	p.NominalY(names...)
	alt := fmt.Sprintf("Horizontal bars, best first: %s.", barsText(c.Bars))
	tab := Table{Head: []string{"model", "family", "bits/char", "interval low", "interval high"}}
	for _, b := range c.Bars {
		tab.Rows = append(tab.Rows, []string{b.Model, b.Kind, fmtNum(float64(b.BitsPerChar), 4), fmtNum(float64(b.Low), 4), fmtNum(float64(b.High), 4)})
	}
	h := vg.Length(n)*vg.Points(24) + 1.3*vg.Inch
	return &Figure{ID: "comparison", Title: "Comparison on the held-out split", Alt: alt, Table: tab, plot: p, w: 7 * vg.Inch, h: h}, nil
}

func barsText(bars []Bar) string {
	var parts []string
	for _, b := range bars {
		parts = append(parts, fmt.Sprintf("%s (%s) %.3f", b.Model, b.Kind, float64(b.BitsPerChar)))
	}
	return strings.Join(parts, "; ")
}

func kindColor(kind string) color.Color {
	switch kind {
	case "rnn":
		return okabeIto[0]
	case "interpolated":
		return okabeIto[4]
	case "ngram":
		return okabeIto[3]
	case "markov":
		return okabeIto[5]
	case "hmm":
		return okabeIto[2]
	}
	return color.Gray{0xaa}
}

// errXY is the points and intervals of a horizontal bar chart.
type errXY struct {
	plotter.XYs
	plotter.XErrors
}

// BreakdownFigure draws grouped bars: one group per subset (frequency
// band, long-range positions), one bar per model.
func BreakdownFigure(id, title string, bs []Breakdown) (*Figure, error) {
	if len(bs) == 0 || len(bs[0].Parts) == 0 {
		return nil, nil
	}
	labels := make([]string, len(bs[0].Parts))
	for i, p := range bs[0].Parts {
		labels[i] = p.Label
	}
	p := newPlot(title, "", "bits per character (lower is better)")
	p.Y.Min = 0
	w := vg.Points(18)
	tab := Table{Head: []string{"model", "positions", "tokens", "characters", "bits/char"}}
	var alt []string
	for k, b := range bs {
		vals := make(plotter.Values, len(labels))
		for i := range labels {
			vals[i] = 0
			if i < len(b.Parts) && finite(b.Parts[i].BitsPerChar) {
				vals[i] = b.Parts[i].BitsPerChar
			}
		}
		bar, err := plotter.NewBarChart(vals, w)
		if err != nil {
			return nil, err
		}
		bar.Offset = vg.Length(float64(k)-float64(len(bs)-1)/2) * w
		bar.Color = okabeIto[k%len(okabeIto)]
		bar.LineStyle.Width = vg.Points(0.5)
		p.Add(bar)
		p.Legend.Add(b.Model, bar)
		for _, part := range b.Parts {
			tab.Rows = append(tab.Rows, []string{b.Model, part.Label, fmt.Sprint(part.Tokens), fmt.Sprint(part.Characters), fmtNum(part.BitsPerChar, 4)})
			alt = append(alt, fmt.Sprintf("%s on %s: %s", b.Model, part.Label, fmtNum(part.BitsPerChar, 3)))
		}
	}
	p.NominalX(labels...)
	return &Figure{ID: id, Title: title, Alt: title + ". " + strings.Join(alt, "; ") + ".", Table: tab, plot: p, w: 7 * vg.Inch, h: 3.5 * vg.Inch}, nil
}

// Figures are every figure of d that has data.
func Figures(d *Data) ([]Figure, error) {
	figs, err := CurveFigures(d)
	if err != nil {
		return nil, err
	}
	if c := d.Comparison; c != nil {
		f, err := ComparisonFigure(c)
		if err != nil {
			return nil, err
		}
		if f != nil {
			figs = append(figs, *f)
		}
		for _, b := range []struct {
			id, title string
			bs        []Breakdown
		}{
			{"frequency-bands", "Bits per character by how often the token was seen in training", c.Bands},
			{"long-range", "Long-range positions against the rest", c.LongRange},
		} {
			f, err := BreakdownFigure(b.id, b.title, b.bs)
			if err != nil {
				return nil, err
			}
			if f != nil {
				figs = append(figs, *f)
			}
		}
	}
	return figs, nil
}

// Render returns the figure in format "svg" or "png".
func (f *Figure) Render(format string) ([]byte, error) {
	var out bytes.Buffer
	wt, err := f.plot.WriterTo(f.w, f.h, format)
	if err != nil {
		return nil, fmt.Errorf("figure %s: %w", f.ID, err)
	}
	if _, err := wt.WriteTo(&out); err != nil {
		return nil, fmt.Errorf("figure %s: %w", f.ID, err)
	}
	return out.Bytes(), nil
}

var (
	svgProlog = regexp.MustCompile(`(?s)^.*?(<svg\b)`)
	svgNS     = regexp.MustCompile(`\s+xmlns(:\w+)?="[^"]*"`)
)

// inlineSVG makes a standalone SVG document fit for inlining in HTML: no
// XML prolog or doctype, no namespace declarations (the HTML parser puts
// an inline svg element in the SVG namespace itself), so the page holds no
// URL at all.
func inlineSVG(b []byte) string {
	s := svgProlog.ReplaceAllString(string(b), "$1")
	return svgNS.ReplaceAllString(s, "")
}

func fmtNum(v float64, prec int) string {
	if !finite(v) {
		return "–"
	}
	return fmt.Sprintf("%.*f", prec, v)
}

func fmtX(v float64) string {
	if v == math.Trunc(v) && math.Abs(v) < 1e15 {
		return fmt.Sprintf("%.0f", v)
	}
	return fmt.Sprintf("%.2f", v)
}
