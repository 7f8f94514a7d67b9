// Package sweep runs many runs of one base run file: the sizes, cells,
// learning rates, corpora or seeds a user wants to compare, each trained
// by the run package in its own run directory, on whatever schedules them
// (a Slurm job array, a Kubernetes indexed job, or the local runner of the
// command line). It never schedules anything itself: a process runs one
// index, and any number of processes on any number of hosts may work on
// one sweep directory at once, each writing only inside its own run
// directory and the sweep's shared baselines folders.
//
// # Sweep file
//
// A sweep file is TOML, decoded as strictly as a run file (an unknown key
// is an error naming it):
//
//	base = "harbour.toml"        # the run file every run starts from (relative to this file)
//	directory = "harbour.runs"   # the sweep directory (default: this file's name, .toml replaced by .runs)
//
//	[[axis]]                     # axes are crossed with one another
//	"model.cell" = ["gru", "lstm"]
//
//	[[axis]]                     # the keys of one axis are zipped: value i of each together
//	"training.learning_rate" = [0.003, 0.01]
//	"training.seed" = [11, 12]
//
//	[[extra]]                    # explicit runs, after the grid
//	"model.cell" = "rnn"
//	"model.hidden_size" = 64
//
// Keys are run-file keys (configs.Keys), quoted ("model.cell") or dotted
// (model.cell); values are what the run file takes and are checked the
// same way, run by run, as --set overrides of the base file. Relative
// paths in data.files resolve against the base file's folder.
//
// # Numbering
//
// Runs are numbered from 0. The first plan follows the canonical order:
// the grid, the first axis varying slowest and the last fastest, then the
// explicit runs in file order. The plan is recorded in the sweep
// directory (plan.json), and a later plan keeps every recorded run's
// index: appending a value to any axis, or adding an explicit run, gives
// the new runs new indices after the highest (or the indices of runs that
// were dropped before they started) and moves no existing run. A sweep
// file that no longer gives a run that has started (a value changed or
// removed under a checkpoint or an outcome) is refused with
// ErrPlanChanged, naming the indices.
//
// # Sweep directory
//
//	plan.json          the recorded plan (Plan), "format": "weft-sweep-plan", "version": 1
//	lock               held while the plan is reconciled and written
//	run-0000/          run 0's run directory (the run package's layout)
//	outcomes/          run-0000.json: how run 0 last ended (Record: done or failed)
//	baselines/KEY/     a baseline ladder shared by the runs whose [data] and
//	                   [evaluation] sections are equal (KEY = BaselinesKey), fitted
//	                   once under its own lock and reused
//
// # Shared file systems
//
// A run directory is locked by the run package (runs.Lock): the lock file
// names the host, the process and a heartbeat refreshed every
// runs.HeartbeatEvery. A lock from another host is never taken over on the
// strength of flock, which does not reach across the hosts of a network
// file system; RunOptions.StealStale takes it over once its heartbeat is
// older than runs.StaleAfter.
package sweep
