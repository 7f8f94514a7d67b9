// Package runs owns a run directory: where a run keeps its resolved run
// file, prepared corpus, checkpoints, metrics log, fitted baselines and
// report, and the training session that fills it. It is what a Go program
// calls to train, resume, inspect or evaluate a run without the command
// line, which is a thin shell over it.
//
// # Layout
//
// Every path is named once, by Layout:
//
//	run.toml          RunFile: the resolved run file (compared key by key on resume)
//	vocab.json        the vocabulary (data.VocabFile)
//	split.json        SplitFile: the split report, "format": "weft-split", "version": 1
//	tokens.bin        the encoded corpus cache (data.TokenCacheFile)
//	metrics.jsonl     MetricsFile: one MetricsLine per logging interval, "version": 1
//	checkpoints/      CheckpointsDir: step-NNNNNNNNN.safetensors and best.safetensors
//	baselines/        BaselinesDir: the fitted ladder (eval.CountsFile, eval.HMMFile) and ManifestFile
//	report/           ReportDir: what 'weft eval' writes
//	lock              LockFile: held by the process working on the directory
//
// Files are written through data/atomicfile (temporary file, fsync,
// rename, folder fsync). Readers check each versioned file's format name
// and version and refuse a newer one; files written before versions
// existed (version 0, with the same fields) still load, as the frozen run
// directory under testdata proves. Non-finite numbers are written as JSON
// null (Number).
//
// # Training
//
// Train opens and locks the directory, resumes from the newest intact
// checkpoint (skipping damaged ones) when the run file differs only in the
// keys SafeOnResume allows and the corpus gives the same vocabulary, and
// trains until a budget, early stopping, an error or the cancellation of
// its context; it then validates and saves. A cancelled run finishes its
// window, saves and reports Interrupted, and resumes bit for bit. The
// divergence guard restores the last saved state with a lowered learning
// rate when the loss is not finite or jumps above
// training.divergence_factor times its recent average. The session never
// prints: it reports to an Observer, and takes its clock, its checkpoint
// writer and a per-step hook as TrainOptions, so that tests can move time,
// fill the disk or spoil the weights.
package runs
