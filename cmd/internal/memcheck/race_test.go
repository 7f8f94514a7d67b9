package memcheck

import "testing"

// skipUnderRace skips a test that checks measured memory sizes in a race
// build, whose shadow memory multiplies them.
func skipUnderRace(t *testing.T) {
	t.Helper()
	if raceEnabled {
		t.Skip("the race detector multiplies memory sizes")
	}
}
