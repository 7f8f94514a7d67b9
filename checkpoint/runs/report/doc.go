// Package report writes the morning report of a run directory: one
// self-contained HTML page, report/index.html, with every figure inline as
// SVG (and saved beside it as SVG and PNG), the numbers of each figure in a
// table, and no reference to anything outside the file: no script, font,
// style sheet or image is fetched.
//
// The page is made from what the run directory holds:
//
//	run.toml                the run's facts (the resolved run file)
//	split.json              data sizes, out-of-vocabulary rates, leakage
//	metrics.jsonl           learning curves, learning rate, gradient norm
//	checkpoints/            the checkpoints kept; the best one for the
//	                        surprisal view and the samples
//	baselines/              the best baseline of the surprisal view
//	report/eval-*.json      the comparison on the held-out split
//	report/status.json      written by Watch: live or ended, and how it
//	                        ended; the warnings heard during training
//
// Watch is a runs.Observer that rewrites the page at every validation of a
// training session, so that a user can keep it open all night: while the
// run is live the page reloads itself every minute and says so; once it has
// ended it does not, and says how the run ended. The live page draws only
// what the run directory's files hold (curves, facts, the latest
// comparison); Build with a prepared dataset adds the surprisal view and
// the samples.
//
// # The surprisal view
//
// The held-out split (test, or the split of the comparison) is cut into
// consecutive blocks of at least BlockChars characters at token boundaries
// (a remainder shorter than half a block joins the block before it). Each
// block's bits per character under the recurrent model is computed from
// the exact scores of the whole split (the model's LogProbs from a zero
// state at the start of the split). The block shown by default is the
// median block: the blocks are sorted by bits per character and the one at
// position ⌊(n-1)/2⌋ is taken, so the view is typical of the split, never
// its most flattering part. Options.Stretch picks block N (1-based)
// instead. Each token is shaded by its bits under the model and under the
// best baseline (a sequential scale) and by their difference (a diverging
// scale). The top five predictions shown on hover come from the model run
// forward over the WarmupTokens tokens before the block (an approximation
// of the full history; the bits shown are exact).
//
// # Colours
//
// Bits use a sequential scale of falling lightness (Moreland's black-body
// scale, from light to dark), differences a diverging one (Moreland's
// smooth blue-red): both were designed to stay readable for the common
// colour-vision deficiencies, and both keep their order when printed in
// grey. Lines and bars use the colour-blind-safe set of Okabe and Ito
// (2008) and differ in dash and marker too.
package report
