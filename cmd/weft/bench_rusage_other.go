//go:build !linux && !darwin

package main

import "time"

// peakRSS is not known on this system.
func peakRSS() (int64, bool) { return 0, false }

// processCPU is not known on this system.
func processCPU() (time.Duration, bool) { return 0, false }
