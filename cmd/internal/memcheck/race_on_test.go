//go:build race

package memcheck

// raceEnabled: the race detector's shadow memory multiplies a process's
// footprint, so the tests that check measured sizes skip under it.
const raceEnabled = true
