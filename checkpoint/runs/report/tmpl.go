package report

import (
	"fmt"
	"html/template"
	"math"
	"time"
)

var funcs = template.FuncMap{
	"num": func(v any, prec int) string {
		switch x := v.(type) {
		case float64:
			return fmtNum(x, prec)
		case Number:
			return fmtNum(float64(x), prec)
		}
		return fmt.Sprint(v)
	},
	"dur":   func(s float64) string { return (time.Duration(s) * time.Second).String() },
	"pct":   func(v float64) string { return fmt.Sprintf("%.2f%%", 100*v) },
	"count": func(n int64) string { return thousands(n) },
	"rate": func(v Number) string {
		if !finite(float64(v)) {
			return "–"
		}
		return thousands(int64(math.Round(float64(v))))
	},
	"signed": func(v float64) string {
		if math.IsNaN(v) {
			return "–"
		}
		return fmt.Sprintf("%+.4f", v)
	},
}

// style is the page's own look: a narrow reading column, a ruled
// "ledger" strip of key numbers, figures each followed by their numbers.
const style = `
body{font:15px/1.45 system-ui,sans-serif;margin:0;background:#fbfaf7;color:#1b1b1b}
main{max-width:62rem;margin:0 auto;padding:1rem 1.25rem 4rem}
header.run{border-bottom:3px double #444;padding:.5rem 0 .75rem}
header.run h1{font-size:1.5rem;margin:.2rem 0}
.state{display:inline-block;padding:.15rem .6rem;border:2px solid #1b1b1b;font-weight:600}
.state.live{border-style:dashed}
dl.ledger{display:grid;grid-template-columns:max-content 1fr;gap:.2rem 1.2rem;margin:1rem 0;padding:.6rem .9rem;border-left:6px solid #0072b2;background:#fff}
dl.ledger dt{font-weight:600}dl.ledger dd{margin:0}
section{margin-top:2.2rem}section>h2{font-size:1.15rem;border-bottom:1px solid #999;padding-bottom:.2rem}
figure{margin:1rem 0;padding:.5rem;background:#fff;border:1px solid #ccc}
figure svg{width:100%;height:auto;display:block}
figcaption{font-size:.9rem;margin:.4rem 0}
table{border-collapse:collapse;font-size:.85rem;margin:.4rem 0}
th,td{border:1px solid #bbb;padding:.15rem .45rem;text-align:left}td.n{text-align:right;font-variant-numeric:tabular-nums}
details summary{cursor:pointer;font-size:.9rem}
.shade{font:13px/1.7 ui-monospace,monospace;white-space:pre-wrap;word-break:break-all;background:#fff;border:1px solid #ccc;padding:.5rem;max-height:24rem;overflow:auto}
.shade span{padding:0 0}
.legend{display:flex;gap:0;margin:.3rem 0;font-size:.8rem}.legend span{padding:.1rem .6rem;border:1px solid #999}
.generated{border:2px dotted #555;background:#fff;padding:.5rem;white-space:pre-wrap;font:13px/1.5 ui-monospace,monospace}
.caution{font-weight:600}
.missing{color:#444;font-style:italic}
pre.toml{background:#fff;border:1px solid #ccc;padding:.5rem;overflow:auto;font-size:.8rem}
@media print{.shade{max-height:none}body{background:#fff}}
`

var pageTmpl = template.Must(template.New("page").Funcs(funcs).Parse(`<!DOCTYPE html>
<html lang="en">
<head>
<meta charset="utf-8">
{{if .Live}}<meta http-equiv="refresh" content="{{.Reload}}">{{end}}
<title>weft run {{.Title}}</title>
<style>` + style + `</style>
</head>
<body>
<main>
<header class="run">
<p>weft · morning report</p>
<h1>Morning report: {{.Title}}</h1>
<p>Run directory <code>{{.Run}}</code></p>
{{if .Live}}<p><span class="state live" id="state">training</span> This page reloads itself every minute while the run trains. Data as of {{.AsOf}}, the latest validation; if that time stops moving long after the next validation was due, the training process has stopped, and <code>weft report --run</code> on the run directory says so.</p>
{{else}}<p><span class="state" id="state">ended</span> {{.Ended}}. This page no longer reloads. Data as of {{.AsOf}}.</p>{{end}}
</header>
<dl class="ledger">{{range .Glance}}<dt>{{index . 0}}</dt><dd>{{index . 1}}</dd>{{end}}</dl>

<section id="curves"><h2>Did it converge?</h2>
{{with index .Missing "curves"}}<p class="missing">{{.}}</p>{{end}}
{{range .Figures}}{{if or (eq .ID "curve-tokens") (eq .ID "curve-time") (eq .ID "learning-rate") (eq .ID "grad-norm")}}{{template "fig" .}}{{end}}{{end}}
</section>

<section id="comparison"><h2>Where does it stand against the baselines?</h2>
{{with index .Missing "comparison"}}<p class="missing">{{.}}</p>{{end}}
{{range .Figures}}{{if or (eq .ID "comparison") (eq .ID "frequency-bands") (eq .ID "long-range")}}{{template "fig" .}}{{end}}{{end}}
{{with .Comparison}}<h3>Every row, best first ({{.Split}} split)</h3>
<p>The best baseline{{with .BestBaseline}}, {{.}},{{end}} was chosen on the validation split. Intervals are block-bootstrap intervals.</p>
<table><thead><tr><th>model</th><th>family</th><th>bits/char</th><th>interval</th><th>vs best baseline</th><th>bits/token</th><th>perplexity</th></tr></thead><tbody>
{{range .Rows}}<tr><td>{{.Model}}</td><td>{{.Kind}}</td><td class="n">{{num .BitsPerChar 4}}</td><td class="n">{{num .CILow 4}} – {{num .CIHigh 4}}</td><td class="n">{{if .Reference}}{{signed .DiffBitsPerChar}}{{end}}</td><td class="n">{{num .BitsPerToken 4}}</td><td class="n">{{num .Perplexity 3}}</td></tr>
{{end}}</tbody></table>{{end}}
</section>

<section id="surprisal"><h2>Where in the text does it still fail?</h2>
{{with index .Missing "surprisal"}}<p class="missing">{{.}}</p>{{end}}
{{with index .Missing "surprisal_baseline"}}<p class="missing">{{.}}</p>{{end}}
{{with .Shade}}
<p>Block {{.Block}} of {{.Blocks}} of the {{.Split}} split (about 2,000 characters each){{if eq .Block .Median}}: the block whose bits per character is the median of all blocks, a typical stretch{{else}}, chosen with --stretch; the median block is {{.Median}}{{end}}.
The model needs {{num .BitsPerChar 3}} bits per character here{{if .Baseline}}, {{.Baseline}} {{num .BaselineBitsPerChar 3}}{{end}}.
Each token is shaded by the bits it cost; hover over a token for its bits under both models and the model's top five predictions.</p>
<div class="legend" role="img" aria-label="bits scale from 0 (light) to {{.Top}} bits or more (dark)">{{range .BitsLegend}}<span style="{{.Style}}">{{.Label}}</span>{{end}}</div>
{{range $i, $r := .Rows}}<h3>{{.Label}}</h3>
<figure class="textfig" id="shade-{{$i}}"><div class="shade">{{range .Cells}}<span style="{{.Style}}" title="{{.Title}}">{{.Text}}</span>{{if .NL}}
{{end}}{{end}}</div></figure>
{{end}}
{{if .Baseline}}<div class="legend" role="img" aria-label="difference scale: blue, the model needs fewer bits; red, more">{{range .DiffLegend}}<span style="{{.Style}}">{{.Label}}</span>{{end}}</div>
<p>Difference: blue where the recurrent model needs fewer bits than the baseline, red where it needs more.</p>{{end}}
{{end}}
</section>

<section id="samples"><h2>Generated text</h2>
{{with index .Missing "samples"}}<p class="missing">{{.}}</p>{{end}}
{{if .Samples}}<p class="caution">The text below is generated by the model, not taken from the corpus. Generated text can be wrong, nonsensical or offensive.</p>
{{range .Samples}}<h3>Generated at temperature {{.Temperature}} (seed {{.Seed}})</h3><div class="generated">{{.Text}}</div>{{end}}{{end}}
</section>

<section id="facts"><h2>The run's facts</h2>
<dl class="ledger"><dt>model</dt><dd>{{.Facts.Model}}</dd><dt>tokenizer</dt><dd>{{.Facts.Tokenizer}}</dd>
<dt>steps</dt><dd>{{count .Facts.Steps}}</dd><dt>tokens trained</dt><dd>{{count .Facts.Tokens}}</dd><dt>training time</dt><dd>{{dur .Facts.WallSeconds}}</dd>
<dt>tokens per second</dt><dd>{{rate .Facts.TokensPerSec}}</dd></dl>
{{with .Facts.Split}}<h3>Data</h3><table><thead><tr><th>split</th><th>characters</th><th>tokens</th><th>lines</th><th>out of vocabulary</th></tr></thead><tbody>
<tr><td>train</td><td class="n">{{count .Train.Characters}}</td><td class="n">{{count .Train.Tokens}}</td><td class="n">{{count .Train.Lines}}</td><td class="n">{{pct .Train.OOVRate}}</td></tr>
<tr><td>validation</td><td class="n">{{count .Validation.Characters}}</td><td class="n">{{count .Validation.Tokens}}</td><td class="n">{{count .Validation.Lines}}</td><td class="n">{{pct .Validation.OOVRate}}</td></tr>
<tr><td>test</td><td class="n">{{count .Test.Characters}}</td><td class="n">{{count .Test.Tokens}}</td><td class="n">{{count .Test.Lines}}</td><td class="n">{{pct .Test.OOVRate}}</td></tr>
</tbody></table><p>Vocabulary: {{.VocabularySize}} entries. Leakage: {{.LeakedTestLines}} test line(s) also occur in the training split.</p>{{end}}
<h3>Checkpoints</h3>{{if .Facts.Checkpoints}}<ul>{{range .Facts.Checkpoints}}<li>{{.}}</li>{{end}}</ul>{{else}}<p class="missing">none yet</p>{{end}}
<h3>Warnings</h3>{{if .Facts.Warnings}}<ul>{{range .Facts.Warnings}}<li>{{.}}</li>{{end}}</ul>{{else}}<p>none</p>{{end}}
<h3>Resolved run file</h3><pre class="toml">{{.Facts.RunFile}}</pre>
</section>
</main>
</body>
</html>
{{define "fig"}}<figure id="fig-{{.ID}}" class="plot" role="group" aria-labelledby="cap-{{.ID}}">
<div role="img" aria-label="{{.Alt}}">{{.SVG}}</div>
<figcaption id="cap-{{.ID}}"><strong>{{.Title}}.</strong> {{.Alt}}</figcaption>
<details><summary>the numbers</summary><table><thead><tr>{{range .Table.Head}}<th>{{.}}</th>{{end}}</tr></thead><tbody>
{{range .Table.Rows}}<tr>{{range .}}<td>{{.}}</td>{{end}}</tr>
{{end}}</tbody></table></details>
</figure>{{end}}
`))
