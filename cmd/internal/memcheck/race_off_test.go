//go:build !race

package memcheck

const raceEnabled = false
