package bench

import (
	"context"
	"fmt"

	"weft/rnn"
)

// SweepPoint is one thread count of a sweep.
type SweepPoint struct {
	Threads         int     `json:"threads"`
	TokensPerSecond float64 `json:"tokens_per_second"`
	SpeedUp         float64 `json:"speed_up"` // over the first count of the sweep
	Report          *Report `json:"report"`
}

// Sweep is what ThreadSweep measured; its JSON form is weft bench
// --threads-sweep --json.
type Sweep struct {
	Cores          int          `json:"cores"`
	BaseThreads    int          `json:"base_threads"`    // the count speed-ups are relative to
	FastestThreads int          `json:"fastest_threads"` // the count with the most tokens/s
	DefaultThreads int          `json:"default_threads"` // what training.threads = 0 picks here (rnn.ChooseThreads)
	Points         []SweepPoint `json:"points"`
}

// SweepCounts is 1, 2, 4, ... up to cores, and cores itself when it is not
// a power of two.
func SweepCounts(cores int) []int {
	var ns []int
	for n := 1; n <= cores; n *= 2 {
		ns = append(ns, n)
	}
	if ns[len(ns)-1] != cores {
		ns = append(ns, cores)
	}
	return ns
}

// ThreadSweep runs Train at every thread count of counts, in the order
// given, each with a fresh model of the same seed and the same windows,
// on a machine of cores cores.
func ThreadSweep(ctx context.Context, mc rnn.Config, tc rnn.TrainConfig, o Options, counts []int, cores int) (*Sweep, error) {
	if len(counts) == 0 {
		return nil, fmt.Errorf("no thread counts to sweep")
	}
	for _, n := range counts {
		if n < 1 {
			return nil, fmt.Errorf("thread counts must be 1 or more, got %d", n)
		}
	}
	sw := &Sweep{Cores: cores, BaseThreads: counts[0], DefaultThreads: rnn.ChooseThreads(mc, tc.BatchSize, cores)}
	for _, n := range counts {
		t := tc
		t.Threads = n
		rep, err := Train(ctx, mc, t, o)
		if err != nil {
			return nil, err
		}
		sw.Points = append(sw.Points, SweepPoint{Threads: n, TokensPerSecond: rep.TokensPerSecond, Report: rep})
	}
	best := 0
	for i := range sw.Points {
		p := &sw.Points[i]
		p.SpeedUp = p.TokensPerSecond / sw.Points[0].TokensPerSecond
		if p.TokensPerSecond > sw.Points[best].TokensPerSecond {
			best = i
		}
	}
	sw.FastestThreads = sw.Points[best].Threads
	return sw, nil
}
