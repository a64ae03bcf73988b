package supervisor

import (
	"errors"
	"strings"
	"testing"
	"time"
)

const frame = 2 * time.Millisecond // a 500 Hz loop

// rig drives a supervisor in lockstep: time is the frame counter, not the clock.
type rig struct {
	t      *testing.T
	s      *Supervisor
	now    time.Duration
	in     Input
	events []Event
}

func newRig(t *testing.T) *rig {
	t.Helper()
	s, err := New(DefaultConfig())
	if err != nil {
		t.Fatal(err)
	}
	r := &rig{t: t, s: s, in: Input{Flux: 1000, HaveReconstructor: true}}
	s.OnTransition = func(e Event) { r.events = append(r.events, e) }
	return r
}

// step feeds one frame and returns the action.
func (r *rig) step() Action {
	r.now += frame
	r.in.Now = r.now
	a := r.s.Observe(r.in)
	r.in.CalibrationDone, r.in.CalibrationFailed = false, false
	return a
}

// run feeds frames for d and returns the actions that were not None.
func (r *rig) run(d time.Duration) []Action {
	var out []Action
	for end := r.now + d; r.now < end; {
		if a := r.step(); a != None {
			out = append(out, a)
		}
	}
	return out
}

// until feeds frames until the state is want, failing after limit.
func (r *rig) until(want State, limit time.Duration) {
	r.t.Helper()
	for end := r.now + limit; r.s.State() != want; {
		if r.now >= end {
			r.t.Fatalf("state %v after %v, want %v", r.s.State(), limit, want)
		}
		r.step()
	}
}

// The setups bring a fresh supervisor into a state with flux 1000 as the reference.
func toStarting(r *rig)    {}
func toCalibrating(r *rig) { r.in.HaveReconstructor = false; r.step(); r.in.HaveReconstructor = true }
func toAcquiring(r *rig)   { r.step() }
func toClosed(r *rig)      { toAcquiring(r); r.until(Closed, time.Second) }
func toHolding(r *rig)     { toClosed(r); r.in.Flux = 100; r.until(Holding, time.Second) }
func toClouded(r *rig)     { toHolding(r); r.until(Clouded, 3*time.Second) }
func toTripped(r *rig)     { toClosed(r); r.in.Tripped = true; r.step() }
func toManual(r *rig)      { toClosed(r); r.s.Operator(CmdOpen, r.now) }

var setups = map[State]func(*rig){
	Starting: toStarting, Calibrating: toCalibrating, Acquiring: toAcquiring, Closed: toClosed,
	Holding: toHolding, Clouded: toClouded, Tripped: toTripped, Manual: toManual,
}

// TestTransitions drives every transition of the table, from every state where the
// table allows "any", and checks the state reached, the action asked for and that the
// transition was reported exactly once.
func TestTransitions(t *testing.T) {
	type tc struct {
		from, to State
		act      func(*rig) []Action
		want     []Action
	}
	// A step per transition of the table, keyed by its states and reason (two
	// transitions may join the same states for different causes).
	type key struct {
		from, to State
		reason   string
	}
	steps := map[key]tc{
		{Starting, Calibrating, "no reconstructor"}:      {act: func(r *rig) []Action { r.in.HaveReconstructor = false; return r.run(frame) }, want: []Action{Calibrate}},
		{Starting, Acquiring, "reconstructor loaded"}:    {act: func(r *rig) []Action { return r.run(frame) }},
		{Calibrating, Acquiring, "calibration finished"}: {act: func(r *rig) []Action { r.in.CalibrationDone = true; return r.run(frame) }},
		{Calibrating, Starting, "calibration failed"}:    {act: func(r *rig) []Action { r.in.CalibrationFailed = true; return r.run(frame) }},
		{Acquiring, Closed, "flux steady above minimum"}: {act: func(r *rig) []Action { return r.run(600 * time.Millisecond) }, want: []Action{Close}},
		{Closed, Holding, "flux lost"}:                   {act: func(r *rig) []Action { r.in.Flux = 100; return r.run(100 * time.Millisecond) }, want: []Action{Hold}},
		// The daemon's watchdog held the loop: no action (it is held already).
		{Closed, Holding, "loop held by the daemon"}:             {act: func(r *rig) []Action { r.in.Held = true; return r.run(frame) }},
		{Holding, Closed, "flux returned"}:                       {act: func(r *rig) []Action { r.in.Flux = 900; return r.run(300 * time.Millisecond) }, want: []Action{Close}},
		{Holding, Clouded, "hold timeout"}:                       {act: func(r *rig) []Action { return r.run(2100 * time.Millisecond) }, want: []Action{Open}},
		{Clouded, Closed, "flux returned"}:                       {act: func(r *rig) []Action { r.in.Flux = 900; return r.run(300 * time.Millisecond) }, want: []Action{Close}},
		{Clouded, Acquiring, "long pause: re-measure reference"}: {act: func(r *rig) []Action { r.until(Acquiring, 61*time.Second); return nil }},
		{Tripped, Acquiring, "trip reset"}:                       {act: func(r *rig) []Action { r.in.Tripped = false; return r.run(frame) }},
		{Manual, Acquiring, "operator resume"}:                   {act: func(r *rig) []Action { r.s.Operator(CmdResume, r.now); return nil }},
	}
	type tcase struct {
		tc
		reason string
	}
	var cases []tcase
	for _, tr := range Transitions {
		froms := []State{tr.From}
		if tr.From == anyState {
			froms = nil
			for _, s := range States() {
				if s != tr.To && !(tr.To == Tripped && s == Manual) {
					froms = append(froms, s)
				}
			}
		}
		for _, f := range froms {
			c, ok := steps[key{f, tr.To, tr.Reason}]
			switch {
			case ok:
			case tr.To == Tripped:
				c = tc{act: func(r *rig) []Action { r.in.Tripped = true; return r.run(frame) }}
			case tr.To == Manual:
				c = tc{act: func(r *rig) []Action { r.s.Operator(CmdHold, r.now); return nil }}
			default:
				t.Fatalf("no test step for %v → %v (%s)", f, tr.To, tr.Reason)
			}
			c.from, c.to = f, tr.To
			cases = append(cases, tcase{c, tr.Reason})
		}
	}
	for _, c := range cases {
		t.Run(c.from.String()+"→"+c.to.String()+" "+c.reason, func(t *testing.T) {
			r := newRig(t)
			setups[c.from](r)
			if r.s.State() != c.from {
				t.Fatalf("setup reached %v, want %v", r.s.State(), c.from)
			}
			r.events = nil
			got := c.act(r)
			if r.s.State() != c.to {
				t.Fatalf("state %v, want %v", r.s.State(), c.to)
			}
			if len(r.events) != 1 || r.events[0].From != c.from || r.events[0].To != c.to {
				t.Fatalf("events %+v, want exactly one %v→%v", r.events, c.from, c.to)
			}
			if r.events[0].Reason != c.reason {
				t.Fatalf("transition %v→%v for %q, want the table's %q", c.from, c.to, r.events[0].Reason, c.reason)
			}
			if len(got) != len(c.want) || (len(got) > 0 && got[0] != c.want[0]) {
				t.Fatalf("actions %v, want %v", got, c.want)
			}
		})
	}
}

// TestNoTransitionWithoutCause checks that a steady state stays put: a closed loop on
// steady flux, a cloud shorter than LossDwell, a manual loop with no light, and a
// tripped loop whose trip is not reset.
func TestNoTransitionWithoutCause(t *testing.T) {
	for _, c := range []struct {
		name  string
		setup func(*rig)
		flux  float64
		want  State
	}{
		{"closed steady", toClosed, 1000, Closed},
		{"closed at the loss threshold", toClosed, 300, Closed},
		{"manual in the dark", toManual, 0, Manual},
		{"tripped stays tripped", toTripped, 1000, Tripped},
		{"acquiring below minimum flux", toAcquiring, 50, Acquiring},
	} {
		t.Run(c.name, func(t *testing.T) {
			r := newRig(t)
			c.setup(r)
			r.events = nil
			r.in.Flux = c.flux
			if acts := r.run(5 * time.Second); len(acts) != 0 || len(r.events) != 0 || r.s.State() != c.want {
				t.Fatalf("state %v, actions %v, events %+v; want %v and nothing", r.s.State(), acts, r.events, c.want)
			}
		})
	}
	t.Run("brief dip shorter than the loss dwell", func(t *testing.T) {
		r := newRig(t)
		toClosed(r)
		r.events = nil
		r.in.Flux = 0
		r.run(10 * time.Millisecond) // < LossDwell = 20 ms
		r.in.Flux = 1000
		r.run(time.Second)
		if len(r.events) != 0 {
			t.Fatalf("events %+v after a 10 ms dip", r.events)
		}
	})
	t.Run("failed calibration waits the retry delay", func(t *testing.T) {
		r := newRig(t)
		r.in.HaveReconstructor = false
		toCalibrating(r)
		r.in.HaveReconstructor = false
		r.in.CalibrationFailed = true
		r.step()
		if acts := r.run(4 * time.Second); len(acts) != 0 {
			t.Fatalf("actions %v before the retry delay", acts)
		}
		if acts := r.run(2 * time.Second); len(acts) != 1 || acts[0] != Calibrate {
			t.Fatalf("actions %v after the retry delay, want one calibrate", acts)
		}
	})
}

// cloud is one passage: the transmission falls linearly over ramp to 1−depth, stays
// for dur, and rises back over ramp.
type cloud struct {
	start, ramp, dur time.Duration
	depth            float64
}

func (c cloud) transmission(t time.Duration) float64 {
	x := 1.0
	switch {
	case t < c.start || t > c.start+2*c.ramp+c.dur:
	case t < c.start+c.ramp:
		x = 1 - c.depth*float64(t-c.start)/float64(c.ramp)
	case t < c.start+c.ramp+c.dur:
		x = 1 - c.depth
	default:
		x = 1 - c.depth*float64(c.start+2*c.ramp+c.dur-t)/float64(c.ramp)
	}
	return x
}

// TestNightWithClouds runs a stretch of night in lockstep with two cloud passages, a
// short one (held through) and a long one (opened), and checks the target:
// closed again within 2 s of the flux returning to the return threshold.
func TestNightWithClouds(t *testing.T) {
	r := newRig(t)
	r.in.HaveReconstructor = false
	clouds := []cloud{
		{start: 5 * time.Second, ramp: 300 * time.Millisecond, dur: time.Second, depth: 0.95},
		{start: 15 * time.Second, ramp: time.Second, dur: 8 * time.Second, depth: 1},
	}
	calibrateAt := time.Duration(-1)
	returned := map[int]time.Duration{}
	for r.now < 40*time.Second {
		tr := 1.0
		for _, c := range clouds {
			tr *= c.transmission(r.now)
		}
		r.in.Flux = 1000 * tr
		if calibrateAt >= 0 && r.now >= calibrateAt+time.Second {
			r.in.HaveReconstructor, r.in.CalibrationDone, calibrateAt = true, true, -1
		}
		switch r.step() {
		case Calibrate:
			calibrateAt = r.now
		}
		for i, c := range clouds {
			if _, ok := returned[i]; !ok && r.now > c.start+c.ramp && tr >= DefaultConfig().ReturnFraction {
				returned[i] = r.now
			}
		}
	}
	var path []string
	for _, e := range r.events {
		path = append(path, e.To.String())
	}
	want := "calibrating acquiring closed holding closed holding clouded closed"
	if strings.Join(path, " ") != want {
		t.Fatalf("path %q, want %q", strings.Join(path, " "), want)
	}
	// the closes after the clouds
	closes := []Event{r.events[4], r.events[7]}
	for i, e := range closes {
		lag := e.At - returned[i]
		t.Logf("passage %d: flux back at %v, closed at %v (%v later)", i+1, returned[i], e.At, lag)
		if lag < 0 || lag > 2*time.Second {
			t.Errorf("passage %d: closed %v after the flux returned, want within 2 s", i+1, lag)
		}
	}
}

// TestValidate refuses every out-of-range field by name.
func TestValidate(t *testing.T) {
	for _, c := range []struct {
		field string
		mod   func(*Config)
	}{
		{"min_flux", func(c *Config) { c.MinFlux = 0 }},
		{"return_fraction", func(c *Config) { c.ReturnFraction = 1.5 }},
		{"loss_fraction", func(c *Config) { c.LossFraction = 0.7 }},
		{"hold_timeout", func(c *Config) { c.HoldTimeout = 0 }},
		{"loss_dwell", func(c *Config) { c.LossDwell = 3 * time.Second }},
		{"return_dwell", func(c *Config) { c.ReturnDwell = 2 * time.Second }},
		{"long_pause", func(c *Config) { c.LongPause = time.Second }},
		{"measure_window", func(c *Config) { c.MeasureWindow = 0 }},
		{"retry_delay", func(c *Config) { c.RetryDelay = -1 }},
	} {
		t.Run(c.field, func(t *testing.T) {
			cfg := DefaultConfig()
			c.mod(&cfg)
			_, err := New(cfg)
			if !errors.Is(err, ErrInvalidConfig) || !strings.Contains(err.Error(), c.field) {
				t.Fatalf("err %v, want ErrInvalidConfig naming %s", err, c.field)
			}
		})
	}
	if err := DefaultConfig().Validate(); err != nil {
		t.Fatal(err)
	}
}
