package demo

import (
	"context"
	"fmt"
	"io"
	"math"
	"strings"
	"time"

	"stillsky/daemon"
	"stillsky/daemon/supervisor"
	stillskyv1 "stillsky/proto/stillsky/v1"
	"stillsky/rig"
	"stillsky/sim/scenario"
)

// defaultClouds are the passages of an autonomous demo whose scenario has none:
// a short one the supervisor holds the loop through (its loss lasts less than
// the 2 s hold timeout) and a long, thick one after which it opens the loop and
// closes it again when the sky clears. The first comes late enough for the
// calibration (about 1 s of frame time, longer on a loaded machine).
var defaultClouds = scenario.Clouds{
	{Start: 10, Duration: 2, Depth: 0.9, Ramp: 0.3},
	{Start: 18, Duration: 6, Depth: 0.99, Ramp: 0.5},
}

// supervisorConfig is the scenario's supervisor section as the daemon takes
// it: the supervisor's defaults without one.
func supervisorConfig(s *scenario.Supervisor) supervisor.Config {
	if s == nil {
		return supervisor.DefaultConfig()
	}
	return supervisor.Config{MinFlux: s.MinFlux, LossFraction: s.LossFraction, ReturnFraction: s.ReturnFraction,
		LossDwell: s.LossDwell, ReturnDwell: s.ReturnDwell, HoldTimeout: s.HoldTimeout, LongPause: s.LongPause,
		MeasureWindow: s.MeasureWindow, RetryDelay: s.RetryDelay}
}

// nightAfter is how long an autonomous night runs on after its last cloud.
const nightAfter = 4 * time.Second

// NightSummary is the record of an autonomous night (demo --autonomous).
type NightSummary struct {
	// FrameTimeS is the length of the night in frame time, seconds.
	FrameTimeS float64 `json:"frame_time_s"`
	// DefaultClouds says the scenario had no clouds and the demo's own two
	// passages were scheduled.
	DefaultClouds bool              `json:"default_clouds"`
	Clouds        []scenario.Cloud  `json:"clouds"`
	Transitions   []NightTransition `json:"transitions"`
	Passages      []PassageSummary  `json:"passages"`
	Supervisor    supervisor.Config `json:"supervisor"`
	FinalState    string            `json:"final_supervisor_state"`
	OperatorCalls int               `json:"operator_calls"`
	// WatchdogHolds counts the holds of the daemon's stale-camera watchdog
	// (each an interlock trip, frames late under the machine's load) that the
	// supervisor saw and closed the loop again after.
	WatchdogHolds int     `json:"watchdog_holds"`
	TrueStrehl    float64 `json:"true_strehl_night"`
}

// NightTransition is one transition of the supervisor.
type NightTransition struct {
	// AtS is the frame time of the frame that caused it, and AppliedS the frame
	// time at which the loop was in the state it asked for (-1 for none).
	AtS      float64 `json:"at_s"`
	AppliedS float64 `json:"applied_s"`
	From     string  `json:"from"`
	To       string  `json:"to"`
	Reason   string  `json:"reason"`
	Action   string  `json:"action"`
	Flux     float64 `json:"flux_e"`
	RefFlux  float64 `json:"reference_flux_e"`
}

// PassageSummary is how the supervisor handled one cloud passage.
type PassageSummary struct {
	// Opened says the loss outlasted the hold timeout and the loop was opened
	// (held through otherwise).
	Opened bool `json:"opened"`
	// ReturnedS is the frame time at which the transmission rose back above the
	// supervisor's return fraction; ClosedS the frame time at which the loop was
	// closed again (-1 if it was not); RecloseS their difference.
	ReturnedS float64 `json:"flux_returned_s"`
	ClosedS   float64 `json:"closed_s"`
	RecloseS  float64 `json:"reclose_s"`
}

// prepareNight gives an autonomous demo's scenario its clouds (the demo's own
// when it has none) and returns the night's length in frame time and a line
// saying what the night holds.
func prepareNight(c *Config, scn *scenario.Scenario) (time.Duration, bool, string) {
	def := len(scn.Clouds) == 0
	if def {
		scn.Clouds = defaultClouds
	}
	night := c.Night
	if night == 0 {
		last := scn.Clouds[len(scn.Clouds)-1]
		night = time.Duration((last.Start+last.Duration)*1e9) + nightAfter
	}
	var parts []string
	for _, cl := range scn.Clouds {
		parts = append(parts, fmt.Sprintf("at %.1f s for %.1f s, depth %.2f, ramps %.1f s", cl.Start, cl.Duration, cl.Depth, cl.Ramp))
	}
	src := "the scenario's clouds"
	if def {
		src = "the demo's own clouds, as the scenario has none"
	}
	line := fmt.Sprintf("autonomous night: %.1f s of frame time, no operator; %s: %s", night.Seconds(), src, strings.Join(parts, "; "))
	return night, def, line
}

// runNight lets the supervisor run the loop for the night with no operator
// command: it only watches, printing each transition as it comes and a status
// line every 2 s of frame time, and returns the loop's status at the end.
func runNight(ctx context.Context, c Config, r *rig.Rig, scn *scenario.Scenario) (*stillskyv1.GetStatusResponse, error) {
	if err := connected(ctx, r, false); err != nil {
		return nil, err
	}
	rate := scn.Loop.FrameRate
	target := uint64(c.night.Seconds() * rate)
	printed, nextLine := 0, 0.0
	// A status line waits one poll, until the supervisor goroutine has
	// published the transitions before it, so that the lines stay in time order.
	line, lineAt := "", -1.0
	flush := func(upTo float64) {
		events := r.Loop.SupervisorEvents()
		for ; printed < len(events) && events[printed].At.Seconds() <= upTo; printed++ {
			fmt.Fprintf(c.Out, "  %7.2f s  %s\n", events[printed].At.Seconds(), transitionText(events[printed]))
		}
	}
	var st *stillskyv1.GetStatusResponse
	for {
		s, err := r.Status(ctx)
		if err != nil {
			return st, err
		}
		st = s
		now := float64(s.GetFrames()) / rate
		if lineAt >= 0 {
			flush(lineAt)
			fmt.Fprint(c.Out, line)
			lineAt = -1
		}
		if now >= nextLine {
			state, _ := r.Loop.SupervisorState()
			_, strehl := r.Bench.Latest()
			line = fmt.Sprintf("  %7.2f s  supervisor %-11s loop %-11s flux %6.0f e-/frame  true Strehl %.3f\n",
				now, state, stateName(s.GetState()), r.Loop.Flux(), strehl)
			lineAt = now
			nextLine += 2
		}
		if s.GetFrames() >= target {
			break
		}
		select {
		case <-ctx.Done():
			return st, ctx.Err()
		case <-time.After(50 * time.Millisecond):
		}
	}
	// The supervisor goroutine publishes the last transitions a few
	// milliseconds late.
	time.Sleep(20 * time.Millisecond)
	if lineAt >= 0 {
		flush(lineAt)
		fmt.Fprint(c.Out, line)
	}
	flush(math.Inf(1))
	return st, nil
}

// transitionText is one transition in words.
func transitionText(e daemon.SupervisorEvent) string {
	s := fmt.Sprintf("%-11s → %-11s %-34s flux %6.0f e- (reference %.0f)", e.From, e.To, e.Reason, e.Flux, e.RefFlux)
	if e.Action != supervisor.None {
		s += "; " + e.Action.String()
		if e.Applied >= 0 {
			s += fmt.Sprintf(" at %.3f s", e.Applied.Seconds())
		}
	}
	return s
}

// passages says how each cloud was handled: whether the loop was opened, and
// how long after the transmission rose back above the return fraction the
// loop was closed again (the first close after the passage began).
func passages(clouds scenario.Clouds, events []daemon.SupervisorEvent, cfg supervisor.Config) []PassageSummary {
	out := make([]PassageSummary, len(clouds))
	for i, cl := range clouds {
		p := PassageSummary{ReturnedS: cl.Recovered(cfg.ReturnFraction), ClosedS: -1, RecloseS: -1}
		start := time.Duration(cl.Start * 1e9)
		for _, e := range events {
			if e.At < start {
				continue
			}
			if e.To == supervisor.Clouded {
				p.Opened = true
			}
			if e.To == supervisor.Closed && e.Applied >= 0 {
				p.ClosedS = e.Applied.Seconds()
				p.RecloseS = p.ClosedS - p.ReturnedS
				break
			}
		}
		out[i] = p
	}
	return out
}

// watchdogHolds counts the transitions caused by the daemon holding the loop itself.
func watchdogHolds(events []daemon.SupervisorEvent) int {
	n := 0
	for _, e := range events {
		if e.To == supervisor.Holding && e.Action == supervisor.None {
			n++
		}
	}
	return n
}

// nightTransitions copies the events into the summary's form.
func nightTransitions(events []daemon.SupervisorEvent) []NightTransition {
	out := make([]NightTransition, len(events))
	for i, e := range events {
		out[i] = NightTransition{AtS: e.At.Seconds(), AppliedS: e.Applied.Seconds(), From: e.From.String(), To: e.To.String(),
			Reason: e.Reason, Action: e.Action.String(), Flux: e.Flux, RefFlux: e.RefFlux}
		if e.Applied < 0 {
			out[i].AppliedS = -1
		}
	}
	return out
}

// writeNight prints the summary of an autonomous night.
func writeNight(out io.Writer, s *Summary) {
	n := s.Night
	mode := "free-running"
	if s.Lockstep {
		mode = "lockstep"
	}
	title := "summary"
	if s.Interrupted {
		title = "summary of the interrupted run"
	}
	fmt.Fprintf(out, "\n%s (%s, autonomous night of %.1f s of frame time, %s, no operator action)\n", title, s.Scenario, n.FrameTimeS, mode)
	fmt.Fprintf(out, "  transitions (frame time of the frame that caused each; the loop took the state at the time given):\n")
	for _, t := range n.Transitions {
		applied := ""
		if t.AppliedS >= 0 {
			applied = fmt.Sprintf("  → %s at %.3f s", t.Action, t.AppliedS)
		}
		fmt.Fprintf(out, "    %8.3f s  %-11s → %-11s %s%s\n", t.AtS, t.From, t.To, t.Reason, applied)
	}
	for i, p := range n.Passages {
		cl := n.Clouds[i]
		how := "held through"
		if p.Opened {
			how = "opened (no trip) after the hold timeout"
		}
		closed := "not closed again before the end of the night"
		if p.ClosedS >= 0 {
			closed = fmt.Sprintf("closed again at %.3f s: re-closed %.3f s after the flux returned (target 2 s)", p.ClosedS, p.RecloseS)
		}
		fmt.Fprintf(out, "  cloud %d (%.1f–%.1f s, depth %.2f): %s; flux back above %.0f %% at %.3f s, %s\n",
			i+1, cl.Start, cl.Start+cl.Duration, cl.Depth, how, 100*n.Supervisor.ReturnFraction, p.ReturnedS, closed)
	}
	trips := fmt.Sprintf("interlock trips %d", s.InterlockTrips)
	if n.WatchdogHolds > 0 {
		trips += fmt.Sprintf(" (%d of them the stale-camera watchdog's holds: frames late under this machine's load, not a cloud; the supervisor closed again after each)", n.WatchdogHolds)
	}
	fmt.Fprintf(out, "  %s; operator commands %d; final loop state %s, supervisor %s\n",
		trips, n.OperatorCalls, s.FinalLoopState, n.FinalState)
	fmt.Fprintf(out, "  true Strehl over the night %.3f at %.3g µm (one long exposure, clouds and calibration included)\n", n.TrueStrehl, s.ScienceWavelengthM*1e6)
	fmt.Fprintf(out, "  rtc latency (µs)             p50 %.1f  p99 %.1f  max %.1f; frames dropped %d, rejected %d\n",
		s.RTCLatencyUs.P50, s.RTCLatencyUs.P99, s.RTCLatencyUs.Max, s.FramesDropped, s.FramesRejected)
	if s.NotRealTime != "" {
		fmt.Fprintf(out, "  ran lockstep, not in real time: %s\n", s.NotRealTime)
	}
}
