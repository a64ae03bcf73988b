package demo_test

import (
	"bytes"
	"context"
	"strings"
	"testing"

	"stillsky/cmd/stillsky/internal/demo"
)

// TestAutonomousNightDemo runs `stillsky demo --scenario small --autonomous
// --lockstep`: the small scenario has no clouds, so the demo schedules its two
// passages; with no operator command the supervisor calibrates, closes, holds
// through the first cloud and opens in the second, and closes again after each
// within the 2 s of the flux returning, with no interlock trip; the
// summary lists each transition and each cloud's re-close time.
func TestAutonomousNightDemo(t *testing.T) {
	var out bytes.Buffer
	sum, err := demo.Run(context.Background(), demo.Config{Scenario: "small", Lockstep: true, Autonomous: true, Out: &out})
	if err != nil {
		t.Fatalf("Run: %v\n%s", err, out.String())
	}
	n := sum.Night
	if n == nil || !n.DefaultClouds || len(n.Clouds) != 2 || n.FrameTimeS != 28 {
		t.Fatalf("night %+v: want the demo's two clouds over 28 s", n)
	}
	// A hold of the daemon's stale-camera watchdog (a lockstep bench silent
	// for over 1 s on a loaded machine) and the re-close after it are the
	// machine's, not the night's: left out of the path, and they must be the
	// only trips.
	var path []string
	for i := 0; i < len(n.Transitions); i++ {
		tr := n.Transitions[i]
		if tr.Reason == "loop held by the daemon" {
			t.Logf("stale-camera hold at %.3f s (the machine's load)", tr.AtS)
			i++ // and the re-close that follows
			continue
		}
		path = append(path, tr.From+"→"+tr.To)
	}
	want := "starting→calibrating calibrating→acquiring acquiring→closed closed→holding holding→closed closed→holding holding→clouded clouded→closed"
	if got := strings.Join(path, " "); got != want {
		t.Fatalf("transitions\n  %s\nwant\n  %s\n%s", got, want, out.String())
	}
	for i, p := range n.Passages {
		if p.Opened != (i == 1) || p.ClosedS < 0 || p.RecloseS < 0 || p.RecloseS > 2 {
			t.Errorf("cloud %d: %+v: want %s, closed again within 2 s of the flux returning", i+1, p, map[bool]string{false: "held through", true: "opened"}[i == 1])
		}
	}
	if sum.InterlockTrips != uint64(n.WatchdogHolds) || sum.FinalLoopState != "closed" || n.FinalState != "closed" {
		t.Errorf("trips %d (%d stale-camera holds), final loop %q, supervisor %q: want no trip but those holds, closed, closed",
			sum.InterlockTrips, n.WatchdogHolds, sum.FinalLoopState, n.FinalState)
	}
	for _, s := range []string{"autonomous night: 28.0 s of frame time", "holding     → clouded", "cloud 2 (18.0–24.0 s, depth 0.99): opened (no trip)", "re-closed", "operator commands 0"} {
		if !strings.Contains(out.String(), s) {
			t.Errorf("output lacks %q:\n%s", s, out.String())
		}
	}
}
