//go:build !linux && !darwin

package main

// peakRSS is not known on this system.
func peakRSS() (int64, bool) { return 0, false }
