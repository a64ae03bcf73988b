package daemon_test

import (
	"context"
	"io"
	"net/http"
	"strings"
	"testing"
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	"stillsky/daemon"
	"stillsky/daemon/supervisor"
	stillskyv1 "stillsky/proto/stillsky/v1"
	"stillsky/rig"
	"stillsky/sim/bench"
	"stillsky/sim/scenario"
)

// nightClouds are the two passages of the autonomous tests: a short thick one
// the supervisor holds through (1.5 s, under its 2 s hold timeout), and a long
// one after which it has opened the loop and must close it again.
var nightClouds = scenario.Clouds{
	{Start: 15, Duration: 1.5, Depth: 0.95, Ramp: 0.2},
	{Start: 19, Duration: 4, Depth: 0.99, Ramp: 0.4},
}

// startAutonomous runs the small scenario's bench in lockstep with clouds,
// and the loop daemon with the supervisor on and no reconstructor.
func startAutonomous(t *testing.T, clouds scenario.Clouds, cfg supervisor.Config) *rig.Rig {
	t.Helper()
	scn, err := scenario.Load("small")
	if err != nil {
		t.Fatal(err)
	}
	scn.Clouds = clouds
	// A lockstep bench on a loaded machine (the race detector beside other
	// packages' tests) was seen silent for over the stale-camera watchdog's 1 s:
	// give it 5 s, as the demo's lockstep fallback does, so that the night's
	// path is the clouds' alone (TestSupervisorAfterWatchdogHold covers a hold).
	rg, err := rig.Start(context.Background(), rig.Config{Scenario: scn, Bench: bench.Options{Lockstep: true},
		Loop: daemon.Config{Autonomous: &daemon.Autonomous{Supervisor: cfg}, Interlocks: daemon.Interlocks{StalePeriods: 2500}}})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() {
		if err := rg.Close(); err != nil {
			t.Errorf("shutdown: %v", err)
		}
	})
	return rg
}

// waitFrameTime waits until the loop has seen frame time d (500 Hz frames) and
// a few milliseconds more for the supervisor goroutine's log.
func waitFrameTime(t *testing.T, rg *rig.Rig, d time.Duration) *stillskyv1.GetStatusResponse {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), 5*time.Minute)
	defer cancel()
	st, err := rg.Client.GetStatus(ctx, &stillskyv1.GetStatusRequest{})
	if err != nil {
		t.Fatal(err)
	}
	if target := uint64(d.Seconds() * 500); st.GetFrames() < target {
		if st, err = rig.WaitFrames(ctx, rg.Client, target-st.GetFrames()); err != nil {
			t.Fatal(err)
		}
	}
	time.Sleep(20 * time.Millisecond)
	return st
}

// TestAutonomousNight runs the small scenario's bench in lockstep with two cloud
// passages, and the loop daemon with the supervisor on (stillsky loop
// --autonomous), over real gRPC, with no Control API call at all. The daemon
// starts without a reconstructor: the supervisor must calibrate, wait for the
// flux, close; hold through the first cloud and close again; open on the
// second (after the hold timeout) and close again when it has passed. Targets
// (issue 13): closed again within 2 s of frame time of the flux coming back
// above the return threshold, and no interlock trip.
func TestAutonomousNight(t *testing.T) {
	cfg := supervisor.DefaultConfig()
	rg := startAutonomous(t, nightClouds, cfg)
	// 25 s of frame time at 500 Hz (about 1 s here in lockstep). The clouds
	// leave 15 s for the calibration, which takes about 1 s of frame time: its
	// start and its inversion follow the wall clock while the lockstep bench
	// steps on, so a loaded machine stretches it.
	st := waitFrameTime(t, rg, 25*time.Second)
	events := rg.Loop.SupervisorEvents()
	var path []string
	for _, e := range events {
		path = append(path, e.From.String()+"→"+e.To.String())
		t.Logf("%8.3f s  %-11s → %-11s %-34s flux %6.0f e- (reference %6.0f) action %-9v applied %8.3f s",
			e.At.Seconds(), e.From, e.To, e.Reason, e.Flux, e.RefFlux, e.Action, e.Applied.Seconds())
		switch e.Action {
		case supervisor.Close, supervisor.Hold, supervisor.Open:
			if e.Applied != e.At {
				t.Errorf("%v→%v: the loop took the state for %v at %v, want at the frame that caused it (%v)", e.From, e.To, e.Action, e.Applied, e.At)
			}
		}
	}
	want := []string{"starting→calibrating", "calibrating→acquiring", "acquiring→closed",
		"closed→holding", "holding→closed", "closed→holding", "holding→clouded", "clouded→closed"}
	if strings.Join(path, " ") != strings.Join(want, " ") {
		t.Fatalf("transitions\n  %s\nwant\n  %s", strings.Join(path, " "), strings.Join(want, " "))
	}
	// The first close ends acquisition before the first cloud; the re-closes
	// follow the two passages.
	if e := events[2]; e.Applied >= time.Duration(nightClouds[0].Start*1e9) {
		t.Errorf("first closed at %v, after the first cloud began", e.Applied)
	}
	for i, k := range []int{4, 7} {
		back := time.Duration(nightClouds[i].Recovered(cfg.ReturnFraction) * 1e9)
		e := events[k]
		took := e.Applied - back
		t.Logf("cloud %d: flux back above %.0f %% at %.3f s, loop closed at %.3f s: %.3f s", i+1, 100*cfg.ReturnFraction, back.Seconds(), e.Applied.Seconds(), took.Seconds())
		if e.Applied == 0 || took > 2*time.Second || took < 0 {
			t.Errorf("cloud %d: closed again %v after the flux returned, want within 2 s (target)", i+1, took)
		}
	}
	if e := events[6]; e.At-events[5].At < cfg.HoldTimeout {
		t.Errorf("opened %v after holding, before the hold timeout %v", e.At-events[5].At, cfg.HoldTimeout)
	}
	if n := st.GetInterlockTrips(); n != 0 {
		t.Errorf("%d interlock trips (last %q), want none caused by a cloud", n, st.GetLastInterlock())
	}
	if st.GetState() != stillskyv1.LoopState_LOOP_STATE_CLOSED {
		t.Errorf("loop %v at the end, want closed", st.GetState())
	}
	if s, _ := rg.Loop.SupervisorState(); s != supervisor.Closed {
		t.Errorf("supervisor %v at the end, want closed", s)
	}
	// Every transition counted once, as a scrape sees it.
	resp, err := http.Get("http://" + rg.Loop.MetricsAddr() + "/metrics")
	if err != nil {
		t.Fatal(err)
	}
	body, _ := io.ReadAll(resp.Body)
	resp.Body.Close()
	for _, line := range []string{
		`stillsky_supervisor_transitions_total{from="closed",to="holding"} 2`,
		`stillsky_supervisor_transitions_total{from="holding",to="closed"} 1`,
		`stillsky_supervisor_transitions_total{from="clouded",to="closed"} 1`,
		`stillsky_supervisor_transitions_total{from="starting",to="calibrating"} 1`,
		`stillsky_supervisor_state{state="closed"} 1`,
		`stillsky_interlock_trips_total{reason="divergence"} 0`,
	} {
		if !strings.Contains(string(body), line+"\n") {
			t.Errorf("/metrics lacks %s", line)
		}
	}
}

// TestAutonomousLongPause: a cloud that lasts past the long pause makes the
// supervisor measure the reference flux again (clouded → acquiring) and close
// from that measurement when the sky clears, without a calibration and without
// a trip; an operator's command then puts it in manual, where it only watches.
func TestAutonomousLongPause(t *testing.T) {
	cfg := supervisor.DefaultConfig()
	cfg.LongPause = 3 * time.Second
	clouds := scenario.Clouds{{Start: 15, Duration: 6, Depth: 0.99, Ramp: 0.2}}
	rg := startAutonomous(t, clouds, cfg)
	st := waitFrameTime(t, rg, 23*time.Second)
	var path []string
	events := rg.Loop.SupervisorEvents()
	for _, e := range events {
		path = append(path, e.From.String()+"→"+e.To.String())
	}
	want := []string{"starting→calibrating", "calibrating→acquiring", "acquiring→closed",
		"closed→holding", "holding→clouded", "clouded→acquiring", "acquiring→closed"}
	if strings.Join(path, " ") != strings.Join(want, " ") {
		t.Fatalf("transitions\n  %s\nwant\n  %s", strings.Join(path, " "), strings.Join(want, " "))
	}
	pause, closed := events[5], events[6]
	if d := pause.At - events[4].At; d < cfg.LongPause || d > cfg.LongPause+100*time.Millisecond {
		t.Errorf("re-measured %v after opening, want the long pause %v", d, cfg.LongPause)
	}
	// Measured again on the clear sky: the new reference is the star's flux.
	if r0, r1 := events[2].RefFlux, closed.RefFlux; closed.At < time.Duration(21e9) || r1 < 0.9*r0 || r1 > 1.1*r0 {
		t.Errorf("closed at %v with reference %.0f e- (first %.0f): want after the cloud, on the clear sky's flux", closed.At, r1, r0)
	}
	if n := st.GetInterlockTrips(); n != 0 {
		t.Errorf("%d interlock trips, want none", n)
	}
	if _, err := rg.Client.OpenLoop(context.Background(), &stillskyv1.OpenLoopRequest{}); err != nil {
		t.Fatal(err)
	}
	if s, _ := rg.Loop.SupervisorState(); s != supervisor.Manual {
		t.Fatalf("supervisor %v after an operator's open, want manual", s)
	}
	st = waitFrameTime(t, rg, 25*time.Second)
	if st.GetState() != stillskyv1.LoopState_LOOP_STATE_OPEN || st.GetSupervisorState() != "manual" {
		t.Errorf("loop %v, supervisor %q 2 s after the operator opened it, want open and manual: the supervisor must only watch",
			st.GetState(), st.GetSupervisorState())
	}
	// The operator hands the loop back: the supervisor measures the flux again
	// and closes; a second resume has nothing to resume.
	r, err := rg.Client.ResumeAutonomous(context.Background(), &stillskyv1.ResumeAutonomousRequest{})
	if err != nil || r.GetStatus().GetSupervisorState() != "acquiring" {
		t.Fatalf("ResumeAutonomous: %v, supervisor %q; want acquiring", err, r.GetStatus().GetSupervisorState())
	}
	if _, err := rg.Client.ResumeAutonomous(context.Background(), &stillskyv1.ResumeAutonomousRequest{}); status.Code(err) != codes.FailedPrecondition {
		t.Errorf("second ResumeAutonomous: %v, want FailedPrecondition", err)
	}
	st = waitFrameTime(t, rg, 27*time.Second)
	if st.GetState() != stillskyv1.LoopState_LOOP_STATE_CLOSED || st.GetSupervisorState() != "closed" {
		t.Errorf("loop %v, supervisor %q 2 s after the resume, want closed, closed", st.GetState(), st.GetSupervisorState())
	}
}
