package main

import (
	"context"
	"os"
	"weft/checkpoint/modeltest"
	"weft/checkpoint/runs"
	"weft/data"
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

// candidate and compareModels are the comparison's entrants and call as
// the evaluation tests knew them, before both moved to runs.
type candidate struct {
	name, kind string
	model      eval.LanguageModel
}

func compareModels(ctx context.Context, cfg eval.Config, ds *data.Dataset, split string, cands []*candidate, marks []bool, progress eval.ProgressFunc) (*eval.Comparison, error) {
	var models []eval.Entrant
	for _, c := range cands {
		models = append(models, eval.Entrant{Model: c.model, Label: c.name, Kind: c.kind})
	}
	return runs.CompareDataset(ctx, cfg, ds, split, models, marks, progress)
}
