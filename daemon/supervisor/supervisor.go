// Package supervisor is the opt-in state machine that runs a small telescope's loop
// all night without an operator: it calibrates when there is no reconstructor, waits
// for enough light, closes the loop, holds it through a short loss of flux (a cloud),
// opens it without tripping when the loss lasts, closes again when the light returns,
// and measures the reference flux again after a long pause.
//
// It is fed one [Input] per frame with the frame's guide-star flux, which the camera
// reports in every frame (flux_electrons in camera.proto: the sum of the
// subapertures' pixels that a centre-of-gravity centroider forms anyway), and
// answers with an [Action] for the loop (calibrate, close, hold, open); it never
// touches mirror commands itself. Observe allocates nothing and costs a few
// comparisons, so the daemon calls it from its real-time goroutine before each
// frame's command (daemon/autonomous.go) and the action takes effect at the frame
// that caused it; the OnTransition hook must not block. Time is an input, so the
// machine is driven in lockstep by its tests and by the demo, and is independent of
// the load.
//
// # States
//
//	Starting     nothing decided yet (the daemon has just started or a calibration failed)
//	Calibrating  a calibration was asked for and is running
//	Acquiring    loop open, measuring the reference flux; closes when it is steady and high enough
//	Closed       loop closed on a star with flux at or near the reference
//	Holding      flux lost while closed: integrator frozen, mirror kept where it was
//	Clouded      flux lost for longer than HoldTimeout: loop opened (not tripped), waiting
//	Tripped      an interlock tripped; the supervisor never resets a trip itself
//	Manual       an operator command took over; the supervisor only watches
//
// # Transitions
//
// The table [Transitions] lists every allowed transition with its reason; the tests
// drive each one. In words:
//
//	Starting    → Calibrating  no reconstructor loaded (action Calibrate)
//	Starting    → Acquiring    a reconstructor is loaded
//	Calibrating → Acquiring    calibration finished
//	Calibrating → Starting     calibration failed; retried after RetryDelay
//	Acquiring   → Closed       mean flux over MeasureWindow ≥ MinFlux and every frame
//	                           in it ≥ ReturnFraction of that mean (action Close);
//	                           the mean becomes the reference flux
//	Closed      → Holding      flux < LossFraction·reference for LossDwell (action Hold)
//	Closed      → Holding      the daemon held the loop itself (its stale-camera
//	                           watchdog, when frames stopped for a while): the
//	                           supervisor then closes again once the flux is back
//	                           for ReturnDwell, or opens after HoldTimeout
//	Holding     → Closed       flux ≥ ReturnFraction·reference for ReturnDwell (action Close)
//	Holding     → Clouded      held for HoldTimeout (action Open)
//	Clouded     → Closed       flux ≥ ReturnFraction·reference for ReturnDwell (action Close)
//	Clouded     → Acquiring    clouded for LongPause: the reference is stale, measure again
//	any but Manual → Tripped   the loop reports an interlock trip (under an operator
//	                           the supervisor only watches, so Manual stays)
//	Tripped     → Acquiring    the trip was reset by an operator (loop no longer tripped)
//	any         → Manual       operator command open, close or hold
//	Manual      → Acquiring    operator command resume
//
// # Re-measuring after a long pause
//
// After LongPause in Clouded the reference flux is measured again (Acquiring), since
// transparency and airmass change over a long pause and an old reference would make
// the loss and return thresholds wrong. The reconstructor is not measured again: the
// interaction matrix of a Shack–Hartmann sensor and mirror is set by their geometry
// and registration, not by the sky, so a cloud does not make it stale.
//
// # Operator precedence
//
// An operator always wins. An open, close or hold command through the Control API is
// carried out by the daemon as usual and moves the supervisor to Manual, where it
// issues no action until the operator sends resume. A trip is never reset by the
// supervisor; after the operator resets it, the supervisor acquires again.
package supervisor

import (
	"errors"
	"fmt"
	"math"
	"time"
)

// State is a state of the supervisor.
type State int

// The states; see the package doc.
const (
	Starting State = iota
	Calibrating
	Acquiring
	Closed
	Holding
	Clouded
	Tripped
	Manual
	numStates
)

var stateNames = [numStates]string{"starting", "calibrating", "acquiring", "closed", "holding", "clouded", "tripped", "manual"}

// String returns the state's label value (lower case, as in the metrics).
func (s State) String() string {
	if s < 0 || s >= numStates {
		return fmt.Sprintf("state(%d)", int(s))
	}
	return stateNames[s]
}

// States returns every state in order.
func States() []State {
	out := make([]State, numStates)
	for i := range out {
		out[i] = State(i)
	}
	return out
}

// Action is what the supervisor asks of the loop.
type Action int

// The actions.
const (
	None Action = iota
	Calibrate
	Close
	Hold
	Open
)

var actionNames = [...]string{"none", "calibrate", "close", "hold", "open"}

func (a Action) String() string {
	if a < 0 || int(a) >= len(actionNames) {
		return fmt.Sprintf("action(%d)", int(a))
	}
	return actionNames[a]
}

// Command is an operator command seen by the supervisor.
type Command int

// The operator commands.
const (
	CmdOpen Command = iota
	CmdClose
	CmdHold
	CmdResume
)

// Transition is one allowed change of state and why it happens.
type Transition struct {
	From, To State
	Reason   string
}

// anyState marks a transition allowed from every state but its target.
const anyState State = -1

// Transitions is the table of allowed transitions (From == -1 means any state).
var Transitions = []Transition{
	{Starting, Calibrating, "no reconstructor"},
	{Starting, Acquiring, "reconstructor loaded"},
	{Calibrating, Acquiring, "calibration finished"},
	{Calibrating, Starting, "calibration failed"},
	{Acquiring, Closed, "flux steady above minimum"},
	{Closed, Holding, "flux lost"},
	{Closed, Holding, "loop held by the daemon"},
	{Holding, Closed, "flux returned"},
	{Holding, Clouded, "hold timeout"},
	{Clouded, Closed, "flux returned"},
	{Clouded, Acquiring, "long pause: re-measure reference"},
	{anyState, Tripped, "interlock trip"},
	{Tripped, Acquiring, "trip reset"},
	{anyState, Manual, "operator command"},
	{Manual, Acquiring, "operator resume"},
}

// Config holds the supervisor's thresholds and times.
type Config struct {
	MinFlux        float64       // minimum mean flux per frame to close (same unit as Input.Flux), > 0
	LossFraction   float64       // flux below LossFraction·reference counts as lost, in (0, ReturnFraction)
	ReturnFraction float64       // flux at or above ReturnFraction·reference counts as back, in (LossFraction, 1]
	LossDwell      time.Duration // flux must stay lost this long before holding, [0, HoldTimeout)
	ReturnDwell    time.Duration // flux must stay back this long before closing, [0, 2 s)
	HoldTimeout    time.Duration // longest hold before opening, > 0
	LongPause      time.Duration // clouded this long: re-measure the reference, > HoldTimeout
	MeasureWindow  time.Duration // window over which the reference flux is measured, > 0
	RetryDelay     time.Duration // wait after a failed calibration, > 0
}

// DefaultConfig returns thresholds suited to a small telescope at a few hundred Hz.
func DefaultConfig() Config {
	return Config{
		MinFlux:        100,
		LossFraction:   0.3,
		ReturnFraction: 0.6,
		LossDwell:      20 * time.Millisecond,
		ReturnDwell:    200 * time.Millisecond,
		HoldTimeout:    2 * time.Second,
		LongPause:      60 * time.Second,
		MeasureWindow:  500 * time.Millisecond,
		RetryDelay:     5 * time.Second,
	}
}

// ErrInvalidConfig is wrapped by every error of [Config.Validate].
var ErrInvalidConfig = errors.New("invalid supervisor configuration")

// Validate refuses a configuration with a field out of range, naming the field and
// the allowed range.
func (c Config) Validate() error {
	bad := func(field, allowed string, v any) error {
		return fmt.Errorf("%w: %s = %v, allowed %s", ErrInvalidConfig, field, v, allowed)
	}
	finite := func(x float64) bool { return !math.IsNaN(x) && !math.IsInf(x, 0) }
	switch {
	case !finite(c.MinFlux) || c.MinFlux <= 0:
		return bad("min_flux", "> 0", c.MinFlux)
	case !finite(c.ReturnFraction) || c.ReturnFraction <= 0 || c.ReturnFraction > 1:
		return bad("return_fraction", "(0, 1]", c.ReturnFraction)
	case !finite(c.LossFraction) || c.LossFraction <= 0 || c.LossFraction >= c.ReturnFraction:
		return bad("loss_fraction", fmt.Sprintf("(0, return_fraction = %g)", c.ReturnFraction), c.LossFraction)
	case c.HoldTimeout <= 0:
		return bad("hold_timeout", "> 0", c.HoldTimeout)
	case c.LossDwell < 0 || c.LossDwell >= c.HoldTimeout:
		return bad("loss_dwell", fmt.Sprintf("[0, hold_timeout = %v)", c.HoldTimeout), c.LossDwell)
	case c.ReturnDwell < 0 || c.ReturnDwell >= 2*time.Second:
		return bad("return_dwell", "[0, 2s) (the loop must re-close within 2 s of the flux returning)", c.ReturnDwell)
	case c.LongPause <= c.HoldTimeout:
		return bad("long_pause", fmt.Sprintf("> hold_timeout = %v", c.HoldTimeout), c.LongPause)
	case c.MeasureWindow <= 0:
		return bad("measure_window", "> 0", c.MeasureWindow)
	case c.RetryDelay <= 0:
		return bad("retry_delay", "> 0", c.RetryDelay)
	}
	return nil
}

// Input is one observation of the loop, fed once per frame or batch of frames.
type Input struct {
	Now               time.Duration // monotonic time (any origin), non-decreasing
	Flux              float64       // total flux of the frame (sum over subapertures)
	HaveReconstructor bool          // a reconstructor is loaded
	Tripped           bool          // the loop is tripped by an interlock
	Held              bool          // the loop is held (by the supervisor's hold or the daemon's own)
	CalibrationDone   bool          // the calibration asked for has finished
	CalibrationFailed bool          // the calibration asked for has failed
}

// Event is a transition that happened, passed to the OnTransition hook once.
type Event struct {
	From, To State
	At       time.Duration
	Reason   string
	Flux     float64 // the flux of the frame that caused it
	RefFlux  float64 // the reference flux at the time
}

// Supervisor is the state machine. It is not safe for concurrent use: feed it from
// one goroutine.
type Supervisor struct {
	cfg   Config
	state State
	since time.Duration // time the current state was entered
	ref   float64       // reference flux

	// dwell tracking
	lostSince, backSince time.Duration
	lost, back           bool

	// Acquiring window
	winStart       time.Duration
	winSum, winMin float64
	winN           int
	started        bool
	retrying       bool // Starting after a failed calibration: wait RetryDelay

	// OnTransition is called once for every transition (for the log and the metrics).
	OnTransition func(Event)
}

// New returns a supervisor in Starting, or the configuration's validation error.
func New(cfg Config) (*Supervisor, error) {
	if err := cfg.Validate(); err != nil {
		return nil, err
	}
	return &Supervisor{cfg: cfg, state: Starting}, nil
}

// State returns the current state.
func (s *Supervisor) State() State { return s.state }

// Reference returns the reference flux (0 before the first measurement).
func (s *Supervisor) Reference() float64 { return s.ref }

func (s *Supervisor) move(to State, now time.Duration, reason string, flux float64) {
	from := s.state
	s.state, s.since = to, now
	s.lost, s.back = false, false
	if to == Acquiring {
		s.resetWindow(now)
	}
	if s.OnTransition != nil {
		s.OnTransition(Event{From: from, To: to, At: now, Reason: reason, Flux: flux, RefFlux: s.ref})
	}
}

func (s *Supervisor) resetWindow(now time.Duration) {
	s.winStart, s.winSum, s.winMin, s.winN = now, 0, math.Inf(1), 0
}

// Operator records an operator command at time now. Open, close and hold move the
// supervisor to Manual (the daemon carries the command out itself); resume hands
// control back and the supervisor acquires again.
func (s *Supervisor) Operator(cmd Command, now time.Duration) {
	switch cmd {
	case CmdResume:
		if s.state == Manual {
			s.move(Acquiring, now, "operator resume", 0)
		}
	default:
		if s.state != Manual {
			s.move(Manual, now, "operator command", 0)
		}
	}
}

// Observe feeds one observation and returns the action the loop must take (None
// almost always: an action comes only with a transition).
func (s *Supervisor) Observe(in Input) Action {
	now := in.Now
	if !s.started {
		s.started, s.since = true, now
	}
	if in.Tripped && s.state != Tripped && s.state != Manual {
		s.move(Tripped, now, "interlock trip", in.Flux)
		return None
	}
	switch s.state {
	case Starting:
		if s.retrying && now-s.since < s.cfg.RetryDelay {
			return None
		}
		s.retrying = false
		if !in.HaveReconstructor {
			s.move(Calibrating, now, "no reconstructor", in.Flux)
			return Calibrate
		}
		s.move(Acquiring, now, "reconstructor loaded", in.Flux)
	case Calibrating:
		switch {
		case in.CalibrationDone:
			s.move(Acquiring, now, "calibration finished", in.Flux)
		case in.CalibrationFailed:
			s.retrying = true
			s.move(Starting, now, "calibration failed", in.Flux)
		}
	case Acquiring:
		s.winSum += in.Flux
		s.winN++
		s.winMin = math.Min(s.winMin, in.Flux)
		if now-s.winStart >= s.cfg.MeasureWindow {
			mean := s.winSum / float64(s.winN)
			if mean >= s.cfg.MinFlux && s.winMin >= s.cfg.ReturnFraction*mean && in.HaveReconstructor {
				s.ref = mean
				s.move(Closed, now, "flux steady above minimum", in.Flux)
				return Close
			}
			s.resetWindow(now)
		}
	case Closed:
		if in.Held {
			s.move(Holding, now, "loop held by the daemon", in.Flux)
			return None
		}
		if s.dwell(&s.lost, &s.lostSince, in.Flux < s.cfg.LossFraction*s.ref, now, s.cfg.LossDwell) {
			s.move(Holding, now, "flux lost", in.Flux)
			return Hold
		}
	case Holding, Clouded:
		if s.dwell(&s.back, &s.backSince, in.Flux >= s.cfg.ReturnFraction*s.ref, now, s.cfg.ReturnDwell) {
			s.move(Closed, now, "flux returned", in.Flux)
			return Close
		}
		if s.state == Holding && now-s.since >= s.cfg.HoldTimeout {
			s.move(Clouded, now, "hold timeout", in.Flux)
			return Open
		}
		if s.state == Clouded && now-s.since >= s.cfg.LongPause {
			s.move(Acquiring, now, "long pause: re-measure reference", in.Flux)
		}
	case Tripped:
		if !in.Tripped {
			s.move(Acquiring, now, "trip reset", in.Flux)
		}
	case Manual:
	}
	return None
}

// dwell reports whether cond has held continuously for at least d up to now.
func (s *Supervisor) dwell(on *bool, since *time.Duration, cond bool, now, d time.Duration) bool {
	if !cond {
		*on = false
		return false
	}
	if !*on {
		*on, *since = true, now
	}
	return now-*since >= d
}
