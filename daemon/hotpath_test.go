package daemon

import (
	"math/rand/v2"
	"testing"
	"time"

	"gonum.org/v1/gonum/mat"

	"stillsky/controller"
	"stillsky/daemon/supervisor"
	"stillsky/internal/monoclock"
	stillskyv1 "stillsky/proto/stillsky/v1"
)

// The daemon's own per-frame code — validation and assembly, the state machine,
// Step, interlocks, metrics and telemetry — allocates nothing in any loop state
// (docs/hot-path.md). gRPC's transport is measured separately in
// TestHotPathAllocations.
func TestFrameCodeAllocatesNothing(t *testing.T) {
	// With the supervisor on, each frame's flux also goes into its ring.
	d, err := New(Config{CameraAddr: "127.0.0.1:1", MirrorAddr: "127.0.0.1:2", ListenAddr: "127.0.0.1:0", MetricsAddr: "-",
		Autonomous: &Autonomous{}})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { d.ctlLis.Close() })
	const ns, na = 400, 150
	g := &geometry{slopes: ns, actuators: na, frameRate: 1000, stroke: 3e-6, delayFrames: 1, lockstep: true}
	d.geom = g
	rng := rand.New(rand.NewPCG(1, 1))
	m := mat.NewDense(na, ns, nil)
	for i := 0; i < na; i++ {
		for j := 0; j < ns; j++ {
			m.Set(i, j, 1e-4*rng.NormFloat64())
		}
	}
	r, err := controller.ReconstructorFromMatrix(m, time.Unix(0, 0))
	if err != nil {
		t.Fatal(err)
	}
	if err := d.installReconstructor(r, false); err != nil {
		t.Fatal(err)
	}
	rt := newRealtime(d.u, g)
	frame := &stillskyv1.StreamFramesResponse{Slopes: make([]float32, ns)}
	for i := range frame.Slopes {
		frame.Slopes[i] = float32(1e-7 * rng.NormFloat64())
	}
	step := func() {
		frame.FrameNumber++
		now := monoclock.Now()
		if !rt.receive(frame, now) {
			t.Fatal("frame refused")
		}
		rt.delivered(frame, now, now+1000, now+10000)
	}
	for _, s := range []loopState{stateOpen, stateClosed, stateHold, stateOpen} {
		d.u.request(s)
		step() // the state change itself may log
		if got := d.u.current(); got != s {
			t.Fatalf("state %v, want %v", stateNames[got], stateNames[s])
		}
		if a := testing.AllocsPerRun(200, step); a != 0 {
			t.Errorf("%s: %v allocations per frame, want 0", stateNames[s], a)
		}
	}
	// The supervisor saw the frames: with a reconstructor it acquires, and
	// with no flux in these frames it does not close.
	if s, _ := d.SupervisorState(); s != supervisor.Acquiring {
		t.Errorf("supervisor %v after %d frames, want acquiring", s, frame.FrameNumber)
	}
}
