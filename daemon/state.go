package daemon

import (
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	stillskyv1 "stillsky/proto/stillsky/v1"
)

// loopState is the state of the loop; the values index stateNames and convert to
// the wire enum by adding one.
type loopState int32

const (
	stateOpen loopState = iota
	stateClosed
	stateHold
	stateCalibrating
	stateTripped
)

func (s loopState) proto() stillskyv1.LoopState { return stillskyv1.LoopState(s + 1) }

// setState records the real state for metrics and status.
func (d *Daemon) setState(s loopState) {
	d.state.Store(int32(s))
	d.m.setState(s)
}

// requestState asks the real-time goroutine for a state change, after checking
// that it is allowed.
func (d *Daemon) requestState(s loopState) error {
	cur := loopState(d.want.Load())
	switch s {
	case stateClosed:
		if cur == stateCalibrating {
			return status.Error(codes.FailedPrecondition, "cannot close the loop while calibrating")
		}
		if d.loopPtr.Load() == nil {
			return status.Error(codes.FailedPrecondition, errNoReconstructor.Error())
		}
		if !d.cameraUp.Load() || !d.mirrorUp.Load() {
			return status.Error(codes.FailedPrecondition, "cannot close the loop: devices not connected")
		}
	case stateHold:
		if cur != stateClosed {
			return status.Errorf(codes.FailedPrecondition, "cannot hold: the loop is %s, not closed", stateNames[cur])
		}
	case stateOpen:
		if cur == stateCalibrating {
			if cal := d.cal.Load(); cal != nil {
				cal.aborted.Store(true)
			}
		}
	}
	d.want.Store(int32(s))
	d.log.Info("loop state requested", "state", stateNames[s])
	// The real-time goroutine applies the change at its next frame; wait for it
	// so that the status returned shows it, unless frames have stopped.
	deadline := time.Now().Add(500 * time.Millisecond)
	for loopState(d.state.Load()) != s && time.Now().Before(deadline) {
		time.Sleep(200 * time.Microsecond)
	}
	return nil
}
