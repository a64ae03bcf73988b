package ctl

import (
	"testing"
	"time"
)

// TestTimeLeft checks the estimate of the time left against the arithmetic of
// a constant rate: 100 of 1000 frames in 2 s leaves 900 frames, 18 s. The rows
// are one sequence fed to one estimator (a new phase restarts it), so they run
// in order in one test rather than as subtests.
func TestTimeLeft(t *testing.T) {
	t0 := time.Unix(1000, 0)
	var e timeLeft
	for _, c := range []struct {
		phase       string
		done, total uint32
		at          time.Duration
		want        string
	}{
		{"pokes", 0, 1000, 0, ""},
		{"pokes", 50, 1000, 500 * time.Millisecond, ""}, // under a second in
		{"pokes", 100, 1000, 2 * time.Second, "about 18s left"},
		{"pokes", 1000, 1000, 20 * time.Second, ""},
		{"inverting", 0, 10000, 21 * time.Second, ""}, // a new phase starts over
		{"inverting", 2500, 10000, 51 * time.Second, "about 1m30s left"},
	} {
		if got := e.update(c.phase, c.done, c.total, t0.Add(c.at)); got != c.want {
			t.Errorf("%s %d/%d at %v: %q, want %q", c.phase, c.done, c.total, c.at, got, c.want)
		}
	}
}
