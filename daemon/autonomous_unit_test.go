package daemon

import (
	"strings"
	"testing"
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	"gonum.org/v1/gonum/mat"

	"stillsky/controller"
	"stillsky/daemon/supervisor"
	"stillsky/internal/monoclock"
	stillskyv1 "stillsky/proto/stillsky/v1"
)

// A daemon without the supervisor has nothing to resume.
func TestResumeWithoutSupervisor(t *testing.T) {
	d, err := New(Config{CameraAddr: "127.0.0.1:1", MirrorAddr: "127.0.0.1:2", ListenAddr: "127.0.0.1:0", MetricsAddr: "-"})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { d.ctlLis.Close() })
	if err := d.resume(); status.Code(err) != codes.FailedPrecondition || !strings.Contains(err.Error(), "--autonomous") {
		t.Errorf("resume: %v, want FailedPrecondition naming --autonomous", err)
	}
	if s := d.status(); s.GetSupervisorState() != "" {
		t.Errorf("supervisor_state %q without the supervisor, want empty", s.GetSupervisorState())
	}
}

// TestSupervisorAfterWatchdogHold drives the real-time unit frame by frame with
// the supervisor on: it closes the loop on steady flux; the stale-camera
// watchdog then holds the loop (as when frames stopped for a while), which the
// supervisor sees as a hold of its own making (closed → holding, "loop held by
// the daemon"); with the frames and their flux back it closes again after its
// return dwell, at the frame that decided it.
func TestSupervisorAfterWatchdogHold(t *testing.T) {
	d, err := New(Config{CameraAddr: "127.0.0.1:1", MirrorAddr: "127.0.0.1:2", ListenAddr: "127.0.0.1:0", MetricsAddr: "-",
		Autonomous: &Autonomous{}})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { d.ctlLis.Close() })
	const ns, na = 40, 15
	g := &geometry{slopes: ns, actuators: na, frameRate: 1000, stroke: 3e-6, delayFrames: 1, lockstep: true}
	d.geom = g
	r, err := controller.ReconstructorFromMatrix(mat.NewDense(na, ns, nil), time.Unix(0, 0))
	if err != nil {
		t.Fatal(err)
	}
	if err := d.installReconstructor(r, false); err != nil {
		t.Fatal(err)
	}
	rt := newRealtime(d.u, g)
	frame := &stillskyv1.StreamFramesResponse{Slopes: make([]float32, ns), FluxElectrons: 2000}
	step := func(n int) {
		for range n {
			frame.FrameNumber++
			now := monoclock.Now()
			if !rt.receive(frame, now) {
				t.Fatal("frame refused")
			}
			rt.delivered(frame, now, now+1000, now+10000)
		}
	}
	state := func() supervisor.State { s, _ := d.SupervisorState(); return s }
	step(600) // 0.5 s measure window at 1 kHz
	if state() != supervisor.Closed || d.u.current() != stateClosed {
		t.Fatalf("after 600 frames: supervisor %v, loop %s; want closed, closed", state(), stateNames[d.u.current()])
	}
	if !d.u.holdIfClosed() {
		t.Fatal("the watchdog could not hold the loop")
	}
	step(2)
	if state() != supervisor.Holding || d.u.current() != stateHold {
		t.Fatalf("after the watchdog's hold: supervisor %v, loop %s; want holding, hold", state(), stateNames[d.u.current()])
	}
	held := frame.FrameNumber
	step(199) // the 200 ms return dwell is not over
	if state() != supervisor.Holding {
		t.Fatalf("supervisor %v before the return dwell ended, want holding", state())
	}
	step(3)
	if state() != supervisor.Closed || d.u.current() != stateClosed {
		t.Fatalf("%d frames after the hold: supervisor %v, loop %s; want closed, closed", frame.FrameNumber-held, state(), stateNames[d.u.current()])
	}
	a := d.auto
	var reasons []string
	for i := range a.written.Load() {
		reasons = append(reasons, a.ring[i].Reason)
	}
	want := []string{"reconstructor loaded", "flux steady above minimum", "loop held by the daemon", "flux returned"}
	if len(reasons) != len(want) {
		t.Fatalf("transitions %q, want %q", reasons, want)
	}
	for i := range want {
		if reasons[i] != want[i] {
			t.Fatalf("transitions %q, want %q", reasons, want)
		}
	}
	if e := a.ring[3]; e.Action != supervisor.Close || e.Applied != e.At {
		t.Errorf("re-close %+v: want action close applied at its own frame", e)
	}
}

// BenchmarkFrameSupervisor measures the daemon's own per-frame code (receive
// and delivered, loop closed, 400 slopes × 150 actuators) without and with the
// supervisor fed every frame, side by side: the difference is the supervisor's
// cost per frame.
func BenchmarkFrameSupervisor(b *testing.B) {
	for _, on := range []bool{false, true} {
		name := "off"
		if on {
			name = "on"
		}
		b.Run(name, func(b *testing.B) {
			cfg := Config{CameraAddr: "127.0.0.1:1", MirrorAddr: "127.0.0.1:2", ListenAddr: "127.0.0.1:0", MetricsAddr: "-"}
			if on {
				cfg.Autonomous = &Autonomous{}
			}
			d, err := New(cfg)
			if err != nil {
				b.Fatal(err)
			}
			defer d.ctlLis.Close()
			const ns, na = 400, 150
			g := &geometry{slopes: ns, actuators: na, frameRate: 1000, stroke: 3e-6, delayFrames: 1, lockstep: true}
			d.geom = g
			r, err := controller.ReconstructorFromMatrix(mat.NewDense(na, ns, nil), time.Unix(0, 0))
			if err != nil {
				b.Fatal(err)
			}
			if err := d.installReconstructor(r, false); err != nil {
				b.Fatal(err)
			}
			rt := newRealtime(d.u, g)
			frame := &stillskyv1.StreamFramesResponse{Slopes: make([]float32, ns), FluxElectrons: 2000}
			d.u.request(stateClosed)
			b.ReportAllocs()
			for b.Loop() {
				frame.FrameNumber++
				now := monoclock.Now()
				rt.receive(frame, now)
				rt.delivered(frame, now, now+1000, now+10000)
			}
		})
	}
}
