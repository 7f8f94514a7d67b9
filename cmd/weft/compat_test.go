package main

import (
	"os"
	"weft/checkpoint/modeltest"
	"weft/checkpoint/runs"
	"weft/data/demo"
	"weft/eval"
	"weft/eval/surprise"
)

// Names the command-line tests use for what moved into library packages
// (the run directory's parts into runs, the baselines folder's files into
// eval, a scored row into eval/surprise). The tests predate the moves and
// keep their names.
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

type scoreRow = surprise.Row

func fileExists(p string) bool {
	_, err := os.Stat(p)
	return err == nil
}

var writeDemoCorpus = demo.WriteFiles

var sameTrainingState = modeltest.SameTrainingState
