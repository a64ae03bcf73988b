package daemon

import (
	"time"

	stillskyv1 "stillsky/proto/stillsky/v1"
)

// HadamardActuators is the mirror size from which a calibration uses Hadamard
// patterns unless asked otherwise: every actuator moves in every pattern, so
// each frame measures the whole mirror and the interaction matrix has √n times
// the signal-to-noise ratio of single pokes for the same frames (Kasper et al.,
// "Fast calibration of high-order adaptive optics systems", JOSA A 21 (2004)
// 1004, *from memory*). Below it single pokes are as quick and simpler to read.
const HadamardActuators = 1000

// defaultFramesPerPattern is the number of frames averaged per push or pull:
// two for single pokes, one for Hadamard patterns, whose √n gain in
// signal-to-noise ratio more than makes up for it.
func defaultFramesPerPattern(hadamard bool) int {
	if hadamard {
		return 1
	}
	return 2
}

// inversionProgressScale is the Total of the "inverting" progress messages:
// the inversion's work is reported in parts per ten thousand.
const inversionProgressScale = 10000

// inversionProgress returns a Progress function for BuildReconstructor that
// sends an "inverting" message through send at most every 200 ms, so that a
// client can show how far the inversion is and estimate the time left.
func inversionProgress(send func(*stillskyv1.CalibrateResponse) error) func(done, total float64) {
	var last time.Time
	return func(done, total float64) {
		if total <= 0 || time.Since(last) < 200*time.Millisecond {
			return
		}
		last = time.Now()
		_ = send(&stillskyv1.CalibrateResponse{Phase: "inverting",
			Done: uint32(inversionProgressScale * done / total), Total: inversionProgressScale})
	}
}
