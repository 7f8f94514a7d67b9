package runs

import (
	"strings"
	"time"
)

// Observer hears what a training session does. Train calls its methods
// from the goroutine it runs on, never concurrently; they should return
// quickly. The command line draws its progress bar and prints its lines
// from these calls; a service may log them or ignore them.
type Observer interface {
	// Started is called once the model is built, before the first step.
	Started(Start)
	// Progress is called after every training step.
	Progress(Status)
	// Validated is called after every measurement of the validation split.
	Validated(Validation)
	// Notice reports an event worth a line: a warning (a skipped damaged
	// checkpoint, a divergence recovery, a failed periodic save) or
	// information (checkpoints moved aside, nothing left to do).
	Notice(Notice)
}

// Start describes the run a session is about to train.
type Start struct {
	ResumedFrom string // the checkpoint resumed from, "" for a fresh start
	Step        int64  // steps already trained
	Epochs      int    // epochs already completed
	Model       string // the model's name, e.g. "lstm 1x256"
	Params      int64  // trainable parameters
	TrainTokens int64  // tokens in the training split
	Streams     int    // parallel streams of a batch
	UnrollSteps int    // steps of a training window
	Budget      Budget
}

// Budget is the budgets in force; zero fields mean none.
type Budget struct {
	MaxSteps  int
	MaxEpochs int
	MaxTokens int64
	Deadline  time.Time
}

// Status is where a training run stands after a step.
type Status struct {
	Step           int64
	Epoch          int // completed epochs
	TokensPerSec   float64
	Loss           float64 // training loss of the last window, nats per token
	GradNorm       float64 // its gradient norm before clipping
	ValBitsPerChar float64 // of the last validation; NaN before the first
	// BestBitsPerChar is the best validation so far (NaN before the
	// first), at step BestStep.
	BestBitsPerChar float64
	BestStep        int64
	ETA             time.Duration // to the first budget; -1 when there is none
	MaxSteps        int64         // the step budget, 0 when none
	// PlannedSteps is the step a run annealing to its deadline ends at (0:
	// no plan). PlanSlack is the deadline minus the time the run reaches
	// it at its speed so far (negative: late), when PlanSlackKnown.
	PlannedSteps   int64
	PlanSlack      time.Duration
	PlanSlackKnown bool
}

// Validation is one measurement of the validation split.
type Validation struct {
	Step         int64
	CrossEntropy float64 // nats per token
	Perplexity   float64 // per token
	BitsPerChar  float64
	// Improved says it is the best so far; BestBitsPerChar and BestStep
	// are the best so far, this one included.
	Improved        bool
	BestBitsPerChar float64
	BestStep        int64
	// LearningRateDivided says the plateau schedule lowered the rate to
	// LearningRate after this measurement.
	LearningRateDivided bool
	LearningRate        float64
}

// Notice is a line's worth of news from a session.
type Notice struct {
	Warning bool
	Text    string
}

type nopObserver struct{}

func (nopObserver) Started(Start)        {}
func (nopObserver) Progress(Status)      {}
func (nopObserver) Validated(Validation) {}
func (nopObserver) Notice(Notice)        {}

// oneLine keeps an error message on one line.
func oneLine(s string) string {
	s = strings.TrimSpace(s)
	return strings.Join(strings.Fields(strings.ReplaceAll(s, "\n", " ")), " ")
}
