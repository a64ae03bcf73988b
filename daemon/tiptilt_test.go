package daemon

import (
	"context"
	"errors"
	"math"
	"math/rand/v2"
	"strings"
	"testing"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	dto "github.com/prometheus/client_model/go"
	"gonum.org/v1/gonum/mat"

	"stillsky/controller"
	"stillsky/internal/monoclock"
	stillskyv1 "stillsky/proto/stillsky/v1"
)

// ttSim is a daemon with a tip-tilt loop, stepped frame by frame with no
// sockets: hi drives the high-order loop (random reconstructor, 400 slopes,
// 150 actuators on a 15×10 grid), tt the tip-tilt loop at the same rate.
type ttSim struct {
	t     *testing.T
	d     *Daemon
	rt    *realtime
	tt    *ttRealtime
	frame *stillskyv1.StreamFramesResponse
	tilt  *stillskyv1.StreamFramesResponse
}

func newTTSim(t *testing.T, lock Interlocks) *ttSim {
	t.Helper()
	d, err := New(Config{CameraAddr: "127.0.0.1:1", MirrorAddr: "127.0.0.1:2", ListenAddr: "127.0.0.1:0", MetricsAddr: "-",
		Interlocks: lock, TipTilt: &TipTiltConfig{CameraAddr: "127.0.0.1:3", MirrorAddr: "127.0.0.1:4"}})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { d.ctlLis.Close() })
	const ns, na = 400, 150
	pos := make([]float64, 0, 2*na)
	for k := range na {
		pos = append(pos, float64(k%15)*0.5, float64(k/15)*0.5)
	}
	g := &geometry{slopes: ns, actuators: na, frameRate: 1000, stroke: 3e-6, delayFrames: 1, lockstep: true, positions: pos}
	d.geom = g
	rng := rand.New(rand.NewPCG(1, 1))
	m := mat.NewDense(na, ns, nil)
	for i := range na {
		for j := range ns {
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
	// A random matrix has no tilt response to measure: offload as a mirror
	// of ρ = 2 would.
	pp := make([][2]float64, na)
	for k := range pp {
		pp[k] = [2]float64{pos[2*k], pos[2*k+1]}
	}
	off, err := controller.NewTiltOffload(pp, 0.05, 2)
	if err != nil {
		t.Fatal(err)
	}
	d.u.tt.offload.Store(off)
	ctl, err := controller.NewTipTilt(controller.TipTiltParams{Gain: 0.4, Stroke: 1e-5})
	if err != nil {
		t.Fatal(err)
	}
	s := &ttSim{t: t, d: d, rt: newRealtime(d.u, g), tt: newTTRealtime(d.u, d.u.tt, ctl, 1000),
		frame: &stillskyv1.StreamFramesResponse{Slopes: make([]float32, ns)},
		tilt:  &stillskyv1.StreamFramesResponse{Slopes: []float32{2e-7, -1e-7}}}
	for i := range s.frame.Slopes {
		s.frame.Slopes[i] = float32(1e-7 * rng.NormFloat64())
	}
	return s
}

// step hands one high-order frame and one tip-tilt frame to the two loops.
func (s *ttSim) step() {
	s.frame.FrameNumber++
	now := monoclock.Now()
	if !s.rt.receive(s.frame, now) {
		s.t.Fatal("frame refused")
	}
	s.rt.delivered(s.frame, now, now+1000, now+10000)
	s.tilt.FrameNumber++
	if s.tt.receive(s.tilt, now) {
		s.tt.delivered()
	}
}

// Both loops' per-frame code — the tip-tilt loop's validation, integrator,
// offload inbox, interlock and metrics, and the high-order loop with the
// offload of its tip-tilt — allocates nothing in any loop state
// (docs/hot-path.md).
func TestTipTiltFrameCodeAllocatesNothing(t *testing.T) {
	s := newTTSim(t, Interlocks{})
	for _, st := range []loopState{stateOpen, stateClosed, stateHold, stateOpen} {
		s.d.u.request(st)
		s.step() // the state change itself may log
		if got := s.d.u.current(); got != st {
			t.Fatalf("state %v, want %v", stateNames[got], stateNames[st])
		}
		if a := testing.AllocsPerRun(200, s.step); a != 0 {
			t.Errorf("%s: %v allocations per frame pair, want 0", stateNames[st], a)
		}
	}
}

// Closed, the tip-tilt loop integrates its sensor's tilt (c_k = c_{k−1} +
// g·m_k, controller.TipTilt) and takes the tilt the high-order loop offloads:
// a tilted deformable-mirror command loses its plane and the tip-tilt mirror
// gains ρ·β·a; open, the tip-tilt mirror is flat; held, it keeps its command.
func TestTipTiltFollowsTheLoop(t *testing.T) {
	s := newTTSim(t, Interlocks{})
	s.d.u.request(stateClosed)
	s.step()
	s.step() // the tip-tilt loop is live from its first closed frame on
	cx := float64(s.tt.out.Values[0])
	if want := 2 * 0.4 * 2e-7; math.Abs(cx-want) > 1e-3*want {
		t.Fatalf("tip-tilt command after two frames %g, want %g (2·g·m)", cx, want)
	}
	// A pure plane on the deformable mirror: 1e-7 m/m along x.
	loop := s.d.u.loop.Load()
	plane := make([]float32, 150)
	for k := range plane {
		plane[k] = float32(1e-7 * s.rt.g.positions[2*k])
	}
	s.d.u.offloadTilt(loop, plane)
	if tx, ty := s.d.u.tt.inbox.take(); math.Abs(tx-2*0.05*1e-7) > 1e-3*tx || math.Abs(ty) > 1e-3*tx {
		t.Errorf("offloaded (%g, %g) rad, want (%g, 0): ρ·β·a", tx, ty, 2*0.05*1e-7)
	}
	s.d.u.request(stateHold)
	s.step()
	held := s.tt.out.Values[0]
	s.step()
	if s.tt.out.Values[0] != held {
		t.Errorf("held tip-tilt command moved from %g to %g", held, s.tt.out.Values[0])
	}
	// Closing from the hold goes on from the held command: one more step of
	// g·m on top of it.
	s.d.u.request(stateClosed)
	s.step()
	if got, want := float64(s.tt.out.Values[0]), float64(held)+0.4*2e-7; math.Abs(got-want) > 1e-3*want {
		t.Errorf("closed again from the hold: command %g, want %g (held + g·m)", got, want)
	}
	s.d.u.request(stateOpen)
	s.step()
	if v := s.tt.out.Values; v[0] != 0 || v[1] != 0 || s.d.u.tt.live.Load() {
		t.Errorf("open: tip-tilt command %v, live %v; want flat and not live", v, s.d.u.tt.live.Load())
	}
	// Open, nothing is offloaded.
	s.d.u.offloadTilt(loop, plane)
	if tx, ty := s.d.u.tt.inbox.take(); tx != 0 || ty != 0 {
		t.Errorf("open loop offloaded (%g, %g)", tx, ty)
	}
}

// Bad tip-tilt frames — the wrong length, a NaN, an old frame number — are
// refused and counted by reason, and no command goes out for them.
func TestTipTiltRefusesBadFrames(t *testing.T) {
	s := newTTSim(t, Interlocks{})
	s.d.u.request(stateClosed)
	s.step()
	s.step()
	m := s.d.m
	for _, c := range []struct {
		name    string
		slopes  []float32
		number  uint64
		counter func() float64
	}{
		{"length", []float32{1e-7}, s.tilt.FrameNumber + 1, func() float64 { return counterValue(t, m.ttRejLength) }},
		{"nonfinite", []float32{float32(math.NaN()), 0}, s.tilt.FrameNumber + 2, func() float64 { return counterValue(t, m.ttRejNonFinite) }},
		{"out of order", []float32{1e-7, 0}, 1, func() float64 { return counterValue(t, m.ttRejOrder) }},
	} {
		t.Run(c.name, func(t *testing.T) {
			before := c.counter()
			f := &stillskyv1.StreamFramesResponse{FrameNumber: c.number, Slopes: c.slopes}
			if s.tt.receive(f, monoclock.Now()) {
				t.Error("refused frame answered with a command")
			}
			if got := c.counter(); got != before+1 {
				t.Errorf("counted %g, want %g", got, before+1)
			}
		})
	}
}

// A tip-tilt mirror held at its stroke for SaturationFrames frames trips
// both loops: the high-order loop enters tripped at its next frame, the
// trip is counted under tip_tilt_saturation, and the tip-tilt mirror goes
// flat.
func TestTipTiltSaturationTrips(t *testing.T) {
	s := newTTSim(t, Interlocks{SaturationFrames: 10})
	s.d.u.request(stateClosed)
	s.step()
	s.tilt.Slopes[0] = 1e-4 // ten times the stroke per frame at gain 0.4
	for range 10 {
		s.step()
	}
	if s.d.u.wanted() != stateTripped {
		t.Fatalf("after 10 saturated tip-tilt frames the loop wants %v, want tripped", stateNames[s.d.u.wanted()])
	}
	s.step()
	if s.d.u.current() != stateTripped || s.d.u.stats.lastTrip() != tripTipTiltSaturation || counterValue(t, s.d.m.tripTTSat) != 1 {
		t.Errorf("state %v, last trip %q, %g counted", stateNames[s.d.u.current()], s.d.u.stats.lastTrip(), counterValue(t, s.d.m.tripTTSat))
	}
	if v := s.tt.out.Values; v[0] != 0 || v[1] != 0 {
		t.Errorf("tripped: tip-tilt command %v, want flat", v)
	}
}

// A tip-tilt sensor that goes quiet while the loop is closed holds both
// loops (stale_tip_tilt_camera), as does one that never sends a frame.
func TestTipTiltStaleCameraHolds(t *testing.T) {
	for _, c := range []struct {
		name   string
		frames int
	}{{"quiet", 3}, {"never connected", 0}} {
		t.Run(c.name, func(t *testing.T) {
			s := newTTSim(t, Interlocks{})
			s.d.u.tt.stale.Store(int64(30 * time.Millisecond))
			s.d.u.request(stateClosed)
			for range c.frames {
				s.step()
			}
			if c.frames == 0 {
				now := monoclock.Now()
				s.frame.FrameNumber++
				s.rt.receive(s.frame, now)
				s.rt.delivered(s.frame, now, now, now)
			}
			ctx, cancel := context.WithCancel(context.Background())
			defer cancel()
			go s.d.u.tipTiltWatchdog(ctx)
			deadline := time.Now().Add(5 * time.Second)
			// The watchdog holds the loop and then records the trip: wait for
			// both (polling the state alone raced the record).
			for s.d.u.wanted() != stateHold || s.d.u.stats.lastTrip() == "" {
				if time.Now().After(deadline) {
					t.Fatalf("no hold 5 s after the tip-tilt sensor went quiet (state %v)", stateNames[s.d.u.wanted()])
				}
				time.Sleep(time.Millisecond)
			}
			if s.d.u.stats.lastTrip() != tripTipTiltStale || counterValue(t, s.d.m.tripTTStale) != 1 {
				t.Errorf("last trip %q, %g counted", s.d.u.stats.lastTrip(), counterValue(t, s.d.m.tripTTStale))
			}
		})
	}
}

// failingSender is a tip-tilt mirror stream that has gone away.
type failingSender struct{}

func (failingSender) SendMsg(any) error { return errors.New("connection reset") }

// oneFrame is a tip-tilt camera stream that sends one frame.
type oneFrame struct{ sent bool }

func (o *oneFrame) RecvMsg(m any) error {
	if o.sent {
		return errors.New("end")
	}
	o.sent = true
	f := m.(*stillskyv1.StreamFramesResponse)
	f.FrameNumber, f.Slopes = 100, append(f.Slopes[:0], 1e-7, 0)
	return nil
}

// A tip-tilt mirror that cannot be reached while the loop is closed trips
// it (tip_tilt_mirror_unreachable).
func TestTipTiltMirrorUnreachableTrips(t *testing.T) {
	s := newTTSim(t, Interlocks{})
	s.d.u.request(stateClosed)
	s.step()
	if err := s.tt.run(context.Background(), &oneFrame{}, failingSender{}); err == nil {
		t.Fatal("run returned no error for a failing mirror")
	}
	if s.d.u.wanted() != stateTripped || s.d.u.stats.lastTrip() != tripTipTiltUnreachable || counterValue(t, s.d.m.tripTTMirror) != 1 {
		t.Errorf("wants %v, last trip %q, %g counted", stateNames[s.d.u.wanted()], s.d.u.stats.lastTrip(), counterValue(t, s.d.m.tripTTMirror))
	}
}

// Devices that are not a quad cell and a tip-tilt mirror are refused by
// name.
func TestTipTiltDevicesChecked(t *testing.T) {
	qc := &stillskyv1.CameraServiceDescribeResponse{SensorKind: stillskyv1.SensorKind_SENSOR_KIND_QUAD_CELL, SlopeCount: 2, FrameRateHz: 250}
	ttm := &stillskyv1.MirrorServiceDescribeResponse{MirrorKind: stillskyv1.MirrorKind_MIRROR_KIND_TIP_TILT, ActuatorCount: 2, StrokeRad: 1e-5}
	if err := checkTipTiltDevices(qc, ttm); err != nil {
		t.Fatalf("a quad cell and a tip-tilt mirror refused: %v", err)
	}
	for _, c := range []struct {
		name string
		cam  *stillskyv1.CameraServiceDescribeResponse
		mir  *stillskyv1.MirrorServiceDescribeResponse
		want string
	}{
		{"shack-hartmann", &stillskyv1.CameraServiceDescribeResponse{SlopeCount: 480, FrameRateHz: 500}, ttm, "want a quad cell"},
		{"no rate", &stillskyv1.CameraServiceDescribeResponse{SensorKind: stillskyv1.SensorKind_SENSOR_KIND_QUAD_CELL, SlopeCount: 2}, ttm, "frame rate"},
		{"deformable", qc, &stillskyv1.MirrorServiceDescribeResponse{ActuatorCount: 241, StrokeM: 5e-6}, "want a tip-tilt mirror"},
		{"no stroke", qc, &stillskyv1.MirrorServiceDescribeResponse{MirrorKind: stillskyv1.MirrorKind_MIRROR_KIND_TIP_TILT, ActuatorCount: 2}, "stroke"},
	} {
		t.Run(c.name, func(t *testing.T) {
			if err := checkTipTiltDevices(c.cam, c.mir); err == nil || !contains(err.Error(), c.want) {
				t.Errorf("error %v, want one with %q", err, c.want)
			}
		})
	}
}

// The tip-tilt configuration is refused by field and range.
func TestTipTiltConfigRefused(t *testing.T) {
	bad := 2.0
	for _, c := range []struct {
		name string
		cfg  TipTiltConfig
		want string
	}{
		{"addresses", TipTiltConfig{CameraAddr: "a"}, "addresses are both required"},
		{"gain", TipTiltConfig{CameraAddr: "a", MirrorAddr: "b", Gain: &bad}, "tip-tilt gain 2: must be in [0, 2)"},
		{"leak", TipTiltConfig{CameraAddr: "a", MirrorAddr: "b", Leak: 1}, "tip-tilt leak 1: must be in [0, 1)"},
		{"offload", TipTiltConfig{CameraAddr: "a", MirrorAddr: "b", OffloadGain: 1.5}, "offload gain 1.5: must be in (0, 1]"},
	} {
		t.Run(c.name, func(t *testing.T) {
			_, err := New(Config{CameraAddr: "127.0.0.1:1", MirrorAddr: "127.0.0.1:2", ListenAddr: "127.0.0.1:0", MetricsAddr: "-", TipTilt: &c.cfg})
			if err == nil || !contains(err.Error(), c.want) {
				t.Errorf("error %v, want one with %q", err, c.want)
			}
		})
	}
}

func counterValue(t *testing.T, c prometheus.Counter) float64 {
	t.Helper()
	var m dto.Metric
	if err := c.Write(&m); err != nil {
		t.Fatal(err)
	}
	return m.GetCounter().GetValue()
}

func contains(s, sub string) bool { return strings.Contains(s, sub) }
