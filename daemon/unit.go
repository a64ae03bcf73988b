package daemon

import (
	"context"
	"log/slog"
	"sync/atomic"
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	"stillsky/controller"
	"stillsky/controller/centroid"
	stillskyv1 "stillsky/proto/stillsky/v1"
)

// unit is the real-time part of the loop: what the real-time goroutine and the
// control plane share. The control plane (the Control API, the watchdog, the
// persistence) uses only the methods below — request a state, install or retune
// parameters, start a calibration, take a snapshot — and the real-time goroutine
// drives it through a realtime, one frame at a time (realtime.receive and
// realtime.delivered), so that a test can step it frame by frame with no sockets,
// clocks or goroutines of its own, as it steps controller.Loop.
//
// Every method is safe for concurrent use; a change requested between frames
// takes effect at the next frame.
type unit struct {
	m          *metrics
	log        *slog.Logger
	interlocks Interlocks
	recorder   *Recorder

	want  atomic.Int32 // state requested by the control plane
	state atomic.Int32 // state the real-time goroutine is in
	// loop is created with the first parameter set. estimator runs the same
	// reconstructor with gain 0 in open loop, so that the residual estimates are
	// reported before the loop is closed.
	loop      atomic.Pointer[controller.Loop]
	estimator atomic.Pointer[controller.Loop]
	cal       atomic.Pointer[calibration]
	// pixCal is the centroid calibration of a pixel camera (dark, flat,
	// reference), swapped whole between frames; nil for a slope camera.
	pixCal atomic.Pointer[centroid.Calibration]
	// capture, while a pixel calibration is captured, sums the raw frames.
	capture atomic.Pointer[pixelCapture]

	stats     runStats
	telemetry telemetryRing
	// auto, with the supervisor on, is fed every frame; set before the first.
	auto *autonomy
	// tt is the tip-tilt loop's shared part, nil without one (tiptilt.go).
	tt *tipTilt
}

func newUnit(m *metrics, log *slog.Logger, interlocks Interlocks, rec *Recorder) *unit {
	u := &unit{m: m, log: log, interlocks: interlocks, recorder: rec}
	u.want.Store(int32(stateOpen))
	u.setState(stateOpen)
	return u
}

// wanted returns the state last requested.
func (u *unit) wanted() loopState { return loopState(u.want.Load()) }

// current returns the state the real-time goroutine is in.
func (u *unit) current() loopState { return loopState(u.state.Load()) }

// setState records the state the loop is in, for the metrics and the status.
func (u *unit) setState(s loopState) {
	u.state.Store(int32(s))
	u.m.setState(s)
}

// request asks for state s from the next frame on. Opening the loop during a
// calibration aborts it. The caller checks that the change is allowed.
func (u *unit) request(s loopState) {
	if s == stateOpen && u.wanted() == stateCalibrating {
		if cal := u.cal.Load(); cal != nil {
			cal.aborted.Store(true)
		}
	}
	u.want.Store(int32(s))
}

// awaitState waits until the real-time goroutine is in state s, for at most
// timeout or until ctx ends, and reports whether it got there.
func (u *unit) awaitState(ctx context.Context, s loopState, timeout time.Duration) bool {
	deadline := time.Now().Add(timeout)
	for u.current() != s {
		if time.Now().After(deadline) || ctx.Err() != nil {
			return false
		}
		time.Sleep(200 * time.Microsecond)
	}
	return true
}

// holdIfClosed holds a closed loop, at once in the status (the real-time
// goroutine, waiting for a frame, takes the state at its next frame). It
// reports whether the loop was closed.
func (u *unit) holdIfClosed() bool {
	if !u.want.CompareAndSwap(int32(stateClosed), int32(stateHold)) {
		return false
	}
	u.setState(stateHold)
	return true
}

// devicesLost opens the loop when a device session ends: a mirror left
// integrating blind is unsafe.
func (u *unit) devicesLost() {
	if s := u.current(); s == stateClosed || s == stateHold {
		u.want.Store(int32(stateOpen))
	}
	u.setState(stateOpen)
}

// params returns the parameter set in use, or nil before the first install.
func (u *unit) params() *controller.Params {
	if loop := u.loop.Load(); loop != nil {
		return loop.Params()
	}
	return nil
}

// reconstructor returns the reconstructor in use, or nil.
func (u *unit) reconstructor() *controller.Reconstructor {
	if p := u.params(); p != nil {
		return p.Reconstructor()
	}
	return nil
}

// install puts p on the loop and the matching gain-0 set on the estimator; the
// sets they replace are closed once no frame can still be using them. Errors
// carry the gRPC status code the Control API returns. Callers serialise
// installs.
func (u *unit) install(p *controller.Params) error {
	est, err := p.WithGain(0)
	if err != nil {
		p.Close()
		return status.Error(codes.Internal, err.Error())
	}
	loop, eloop := u.loop.Load(), u.estimator.Load()
	if loop == nil {
		if loop, err = controller.NewLoop(p); err != nil {
			return status.Error(codes.Internal, err.Error())
		}
		if eloop, err = controller.NewLoop(est); err != nil {
			return status.Error(codes.Internal, err.Error())
		}
		u.loop.Store(loop)
		u.estimator.Store(eloop)
		return nil
	}
	old, oldEst := loop.Params(), eloop.Params()
	if err := loop.SetParams(p); err != nil {
		p.Close()
		est.Close()
		return status.Errorf(codes.InvalidArgument, "%v", err)
	}
	if err := eloop.SetParams(est); err != nil {
		est.Close()
		return status.Error(codes.Internal, err.Error())
	}
	u.retire(old, oldEst)
	return nil
}

// retune puts p, a set on the same reconstructor with another gain or leak, on
// the loop alone (the estimator runs at gain 0 whatever the gain). There must
// be a loop.
func (u *unit) retune(p *controller.Params) error {
	loop := u.loop.Load()
	old := loop.Params()
	if err := loop.SetParams(p); err != nil {
		p.Close()
		return status.Error(codes.Internal, err.Error())
	}
	u.retire(old)
	return nil
}

// retire closes parameter sets once the real-time goroutine can no longer be
// stepping with them: a frame in progress keeps the set it started with.
func (u *unit) retire(ps ...*controller.Params) {
	start := u.stats.frames.Load()
	go func() {
		deadline := time.Now().Add(time.Second)
		for u.stats.frames.Load() < start+2 && time.Now().Before(deadline) {
			time.Sleep(time.Millisecond)
		}
		for _, p := range ps {
			if p != nil {
				p.Close()
			}
		}
	}()
}

// startCalibration hands cal to the real-time goroutine, which drives it once
// the state calibrating is requested; it reports false when a calibration is
// already running.
func (u *unit) startCalibration(cal *calibration) bool {
	return u.cal.CompareAndSwap(nil, cal)
}

// snapshot is the unit's figures at one moment, for the status.
type snapshot struct {
	state                                loopState
	frames, dropped, rejected, lastFrame uint64
	slopeRMS, wavefrontRMS, strehl       float64
	saturated                            int
	rtc, endToEnd                        *stillskyv1.LatencySummary
	trips                                uint64
	lastTrip                             string
	reconstructor                        *controller.Reconstructor
}

// snapshot returns the current figures.
func (u *unit) snapshot() snapshot {
	st := &u.stats
	return snapshot{
		state:         u.current(),
		frames:        st.frames.Load(),
		dropped:       st.dropped.Load(),
		rejected:      st.rejected.Load(),
		lastFrame:     st.lastFrame.Load(),
		slopeRMS:      st.slopeRMS.Load(),
		wavefrontRMS:  st.wavefrontRMS.Load(),
		strehl:        st.strehl.Load(),
		saturated:     int(st.saturated.Load()),
		rtc:           st.rtc.summary(),
		endToEnd:      st.e2e.summary(),
		trips:         st.trips.Load(),
		lastTrip:      st.lastTrip(),
		reconstructor: u.reconstructor(),
	}
}
