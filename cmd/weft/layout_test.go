package main

import (
	"weft/checkpoint/runs"
	"weft/eval"
)

// The names the command-line tests use for the run directory's parts,
// which package runs now owns (and eval, for the files inside the
// baselines folder). The tests predate the move and keep their names.
const (
	checkpointsDir   = runs.CheckpointsDir
	metricsFile      = runs.MetricsFile
	runConfigFile    = runs.RunFile
	baselinesDir     = runs.BaselinesDir
	reportDir        = runs.ReportDir
	baselineManifest = runs.ManifestFile
	baselineCounts   = eval.CountsFile
)

var changedKeys = runs.ChangedKeys

func fileExists(p string) bool { return isFile(p) }
