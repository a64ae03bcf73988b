package daemon

import (
	"context"
	"sync"
	"sync/atomic"
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	"stillsky/daemon/supervisor"
	stillskyv1 "stillsky/proto/stillsky/v1"
)

// Autonomous turns on the unattended-operation supervisor (stillsky loop
// --autonomous; the state machine is daemon/supervisor): the daemon then
// calibrates when it has no reconstructor, waits for enough flux, closes the
// loop, holds it through a short loss of flux, opens it (without a trip) when
// the loss lasts, closes it again when the flux returns, and measures the
// reference flux again after a long pause. An operator's open, close or hold
// through the Control API puts the supervisor in manual, where it only watches.
type Autonomous struct {
	// Supervisor holds the thresholds and times; the zero value takes
	// supervisor.DefaultConfig.
	Supervisor supervisor.Config
	// Calibration is the request the supervisor calibrates with; nil takes the
	// defaults of an empty CalibrateRequest.
	Calibration *stillskyv1.CalibrateRequest
}

// SupervisorEvent is one transition of the supervisor as the daemon carried it
// out. Its At is the frame time of the frame that caused it, (frame number − 1)
// × frame period: the camera's clock, which a lockstep bench runs frame by frame
// whatever the load.
type SupervisorEvent struct {
	supervisor.Event
	// Action is what the transition asked of the loop (None for most).
	Action supervisor.Action
	// Applied is the frame time of the frame at which the loop was in the state
	// the action asked for; -1 when there was no such action or the loop did not
	// take the state.
	Applied time.Duration
}

// eventRingSize bounds the transitions awaiting the supervisor goroutine; a
// handful happen in a night.
const eventRingSize = 64

// autonomy is the daemon's side of the supervisor. The real-time goroutine
// feeds it every frame (step, then settle), so that a decision takes effect at
// the very frame that caused it: in lockstep the night is the same frame for
// frame whatever the machine's load. That costs a lock nobody else holds but
// for an operator's command, a few comparisons and no allocation; the logging,
// the counting and the calibrations are the supervisor goroutine's.
type autonomy struct {
	cfg Autonomous
	mu  sync.Mutex // guards s, pending, asked, ring writes
	s   *supervisor.Supervisor
	// pending are the transitions of the frame being handled, until settle
	// knows whether the loop took the state they asked for.
	pending  [4]SupervisorEvent
	npending int
	// ring hands settled transitions to the supervisor goroutine.
	ring     [eventRingSize]SupervisorEvent
	written  atomic.Uint64
	read     atomic.Uint64 // entries the supervisor goroutine has taken
	overflow atomic.Uint64
	// history is every transition so far, oldest first (supervisor goroutine;
	// read under histMu).
	histMu  sync.Mutex
	history []SupervisorEvent
	// The calibration the supervisor asks for: calibrate wakes the goroutine
	// that runs it, which sets calDone or calFailed when it ends.
	calibrate          chan struct{}
	calDone, calFailed atomic.Bool
}

func newAutonomy(cfg Autonomous) (*autonomy, error) {
	if cfg.Supervisor == (supervisor.Config{}) {
		cfg.Supervisor = supervisor.DefaultConfig()
	}
	if cfg.Calibration == nil {
		cfg.Calibration = &stillskyv1.CalibrateRequest{}
	}
	s, err := supervisor.New(cfg.Supervisor)
	if err != nil {
		return nil, err
	}
	a := &autonomy{cfg: cfg, s: s, calibrate: make(chan struct{}, 1)}
	s.OnTransition = func(e supervisor.Event) {
		if a.npending == len(a.pending) {
			a.publish()
		}
		a.pending[a.npending] = SupervisorEvent{Event: e, Applied: -1}
		a.npending++
	}
	return a, nil
}

// frameTime is the frame time of frame num at rate hz: (num − 1)/hz.
func frameTime(num uint64, hz float64) time.Duration {
	return time.Duration(float64(max(num, 1)-1) / hz * 1e9)
}

// step feeds the supervisor frame num (flux in photo-electrons) before the
// loop computes it, with the loop in state cur, and requests the state an
// action asks for, which the frame's compute then takes. Real-time goroutine.
func (a *autonomy) step(u *unit, num uint64, hz, flux float64, cur loopState) {
	a.mu.Lock()
	have := u.params() != nil
	act := a.s.Observe(supervisor.Input{Now: frameTime(num, hz), Flux: flux, HaveReconstructor: have,
		Tripped: cur == stateTripped, Held: cur == stateHold, CalibrationDone: a.calDone.Swap(false), CalibrationFailed: a.calFailed.Swap(false)})
	if act != supervisor.None && a.npending > 0 {
		a.pending[a.npending-1].Action = act
	}
	switch act {
	case supervisor.Calibrate:
		select {
		case a.calibrate <- struct{}{}:
		default:
		}
	case supervisor.Close:
		if have && u.wanted() != stateCalibrating {
			u.request(stateClosed)
		}
	case supervisor.Hold:
		if u.wanted() == stateClosed {
			u.request(stateHold)
		}
	case supervisor.Open:
		if s := u.wanted(); s == stateClosed || s == stateHold {
			u.request(stateOpen)
		}
	}
	a.mu.Unlock()
}

// settle records, after the loop computed frame num in state cur, whether the
// transitions of the frame got the state they asked for, and hands them to the
// supervisor goroutine. Real-time goroutine.
func (a *autonomy) settle(num uint64, hz float64, cur loopState) {
	a.mu.Lock()
	for i := range a.npending {
		e := &a.pending[i]
		if s, ok := actionState(e.Action); ok && s == cur {
			e.Applied = frameTime(num, hz)
		}
	}
	a.publish()
	a.mu.Unlock()
}

// publish moves the pending transitions to the ring. The caller holds a.mu.
func (a *autonomy) publish() {
	for i := range a.npending {
		w := a.written.Load()
		if w-a.read.Load() >= eventRingSize {
			a.overflow.Add(1)
			continue
		}
		a.ring[w%eventRingSize] = a.pending[i]
		a.written.Store(w + 1)
	}
	a.npending = 0
}

// actionState is the loop state an action asks for.
func actionState(act supervisor.Action) (loopState, bool) {
	switch act {
	case supervisor.Close:
		return stateClosed, true
	case supervisor.Hold:
		return stateHold, true
	case supervisor.Open:
		return stateOpen, true
	}
	return 0, false
}

// SupervisorEvents returns the supervisor's transitions so far, oldest first
// (nil without Autonomous). The newest may lag by a few milliseconds.
func (d *Daemon) SupervisorEvents() []SupervisorEvent {
	a := d.auto
	if a == nil {
		return nil
	}
	a.histMu.Lock()
	defer a.histMu.Unlock()
	return append([]SupervisorEvent(nil), a.history...)
}

// SupervisorState returns the supervisor's state and whether there is a
// supervisor.
func (d *Daemon) SupervisorState() (supervisor.State, bool) {
	a := d.auto
	if a == nil {
		return 0, false
	}
	a.mu.Lock()
	defer a.mu.Unlock()
	return a.s.State(), true
}

// operator tells the supervisor of an operator's command through the Control
// API, which the daemon has carried out: it moves the supervisor to manual.
func (d *Daemon) operator(cmd supervisor.Command) {
	a := d.auto
	g := d.geometry()
	if a == nil || g == nil {
		return
	}
	a.mu.Lock()
	defer a.mu.Unlock()
	a.s.Operator(cmd, frameTime(d.u.stats.lastFrame.Load(), g.frameRate))
	a.publish()
}

// resume hands the loop back to the supervisor after an operator took over.
// Errors carry the gRPC status code the Control API returns.
func (d *Daemon) resume() error {
	a := d.auto
	if a == nil {
		return status.Error(codes.FailedPrecondition, "the daemon runs without the supervisor (start it with --autonomous)")
	}
	hz := 1.0
	if g := d.geometry(); g != nil {
		hz = g.frameRate
	}
	a.mu.Lock()
	defer a.mu.Unlock()
	if st := a.s.State(); st != supervisor.Manual {
		return status.Errorf(codes.FailedPrecondition, "the supervisor is %s, not manual: nothing to resume", st)
	}
	a.s.Operator(supervisor.CmdResume, frameTime(d.u.stats.lastFrame.Load(), hz))
	a.publish()
	d.log.Info("supervisor resumed by an operator")
	return nil
}

// supervise is the supervisor goroutine: it logs and counts each transition
// once, keeps the history, and runs the calibrations the supervisor asks for.
func (d *Daemon) supervise(ctx context.Context) {
	a := d.auto
	a.mu.Lock()
	d.m.supervisor.Set(a.s.State())
	a.mu.Unlock()
	go func() {
		for {
			select {
			case <-ctx.Done():
				return
			case <-a.calibrate:
			}
			err := d.calibrate(ctx, a.cfg.Calibration, func(*stillskyv1.CalibrateResponse) error { return nil })
			if err != nil {
				d.log.Warn("supervisor: calibration failed", "err", err)
				a.calFailed.Store(true)
				continue
			}
			a.calDone.Store(true)
		}
	}()
	tick := time.NewTicker(5 * time.Millisecond)
	defer tick.Stop()
	var lost uint64
	for {
		select {
		case <-ctx.Done():
			return
		case <-tick.C:
		}
		for r, w := a.read.Load(), a.written.Load(); r < w; r++ {
			e := a.ring[r%eventRingSize]
			a.read.Store(r + 1)
			d.m.supervisor.Observe(e.Event)
			d.log.Info("supervisor transition", "from", e.From.String(), "to", e.To.String(), "reason", e.Reason,
				"frame_time", e.At, "flux_e", e.Flux, "reference_flux_e", e.RefFlux, "action", e.Action.String(), "applied", e.Applied)
			a.histMu.Lock()
			a.history = append(a.history, e)
			a.histMu.Unlock()
		}
		if n := a.overflow.Load(); n != lost {
			d.log.Warn("supervisor: transitions lost from the log (not from the state machine)", "count", n-lost)
			lost = n
		}
	}
}

// Flux returns the guide-star flux of the newest frame as the camera reported
// it, photo-electrons (0 before the first frame or from a camera without it).
func (d *Daemon) Flux() float64 { return d.u.stats.flux.Load() }
