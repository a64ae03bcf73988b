package daemon

import stillskyv1 "stillsky/proto/stillsky/v1"

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
