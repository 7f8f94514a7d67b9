//go:build race

package linalg

// raceEnabled: the race detector makes sync.Pool drop items on purpose, so
// allocation counts are not meaningful.
const raceEnabled = true
