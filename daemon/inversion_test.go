package daemon

import (
	"fmt"
	"strings"
	"testing"

	stillskyv1 "stillsky/proto/stillsky/v1"
)

// TestCalibrationPatternDefaults checks that a calibration request with no
// pattern settings pokes single actuators, two frames each, below
// HadamardActuators, and uses Hadamard patterns of one frame from there up;
// an explicit request for Hadamard patterns, single pokes or frames is kept at
// any size, and a request for both pattern kinds is refused.
func TestCalibrationPatternDefaults(t *testing.T) {
	for _, c := range []struct {
		actuators int
		req       *stillskyv1.CalibrateRequest
		hadamard  bool
		frames    int
	}{
		{HadamardActuators - 1, &stillskyv1.CalibrateRequest{}, false, 2},
		{HadamardActuators, &stillskyv1.CalibrateRequest{}, true, 1},
		{3365, &stillskyv1.CalibrateRequest{FramesPerPattern: 3}, true, 3},
		{100, &stillskyv1.CalibrateRequest{Hadamard: true}, true, 1},
		{HadamardActuators, &stillskyv1.CalibrateRequest{SinglePokes: true}, false, 2},
		{3365, &stillskyv1.CalibrateRequest{SinglePokes: true, FramesPerPattern: 1}, false, 1},
		{100, &stillskyv1.CalibrateRequest{SinglePokes: true}, false, 2},
	} {
		t.Run(fmt.Sprintf("%d-actuators-%v", c.actuators, c.req), func(t *testing.T) {
			g := &geometry{slopes: 2 * c.actuators, actuators: c.actuators, frameRate: 1000, stroke: 1e-6, delayFrames: 2}
			cc, _, err := calibrationSettings(c.req, g)
			if err != nil {
				t.Fatal(err)
			}
			if cc.Hadamard != c.hadamard || cc.FramesPerPattern != c.frames {
				t.Errorf("%d actuators, request %v: hadamard %v, %d frames per pattern; want %v, %d",
					c.actuators, c.req, cc.Hadamard, cc.FramesPerPattern, c.hadamard, c.frames)
			}
		})
	}
}

// TestCalibrationRefusesBothPatternKinds checks that asking for Hadamard
// patterns and single pokes at once is refused with a message naming both.
func TestCalibrationRefusesBothPatternKinds(t *testing.T) {
	g := &geometry{slopes: 200, actuators: 100, frameRate: 1000, stroke: 1e-6, delayFrames: 2}
	_, _, err := calibrationSettings(&stillskyv1.CalibrateRequest{Hadamard: true, SinglePokes: true}, g)
	if err == nil || !strings.Contains(err.Error(), "hadamard") || !strings.Contains(err.Error(), "single_pokes") {
		t.Fatalf("error %v, want a refusal naming hadamard and single_pokes", err)
	}
}

// TestInversionProgressThrottled checks that the inversion's progress reaches
// the client as "inverting" messages in parts of inversionProgressScale, at
// most one per 200 ms.
func TestInversionProgressThrottled(t *testing.T) {
	var got []*stillskyv1.CalibrateResponse
	p := inversionProgress(func(r *stillskyv1.CalibrateResponse) error { got = append(got, r); return nil })
	for i := range 1000 {
		p(float64(i), 4000)
	}
	if len(got) != 1 {
		t.Fatalf("%d messages in a burst, want 1", len(got))
	}
	if r := got[0]; r.GetPhase() != "inverting" || r.GetDone() != 0 || r.GetTotal() != inversionProgressScale {
		t.Errorf("message %v", r)
	}
}
