package daemon

import (
	"fmt"
	"log/slog"
	"math/rand/v2"
	"runtime/debug"
	"testing"
	"time"

	"gonum.org/v1/gonum/mat"

	"stillsky/controller"
	stillskyv1 "stillsky/proto/stillsky/v1"
)

// benchSim is a lockstep device pair for driving the real-time unit frame by frame
// with no sockets: frame k shows the command that answered frame k−1 (one frame
// of delay) through the interaction matrix im, plus the turbulence slopes sky.
type benchSim struct {
	t     *testing.T
	u     *unit
	rt    *realtime
	im    *mat.Dense // slopes × actuators
	sky   []float32
	shown []float32 // the command frame k shows
	num   uint64
	now   int64
}

func newBenchSim(t *testing.T, slopes, actuators int, lock Interlocks) *benchSim {
	t.Helper()
	if err := lock.setDefaults(); err != nil {
		t.Fatal(err)
	}
	g := &geometry{slopes: slopes, actuators: actuators, frameRate: 1000, stroke: 1e-5, delayFrames: 1, lockstep: true}
	u := newUnit(newMetrics(), slog.New(slog.DiscardHandler), lock, nil)
	rng := rand.New(rand.NewPCG(3, 4))
	im := mat.NewDense(slopes, actuators, nil)
	for i := range slopes {
		for j := range actuators {
			im.Set(i, j, 1e3*rng.NormFloat64()) // rad of slope per m of stroke
		}
	}
	return &benchSim{t: t, u: u, rt: newRealtime(u, g), im: im, sky: make([]float32, slopes), shown: make([]float32, actuators)}
}

// step makes the next frame from the command shown, hands it to the unit as the
// real-time goroutine would, and returns the command the unit sent (nil for
// none).
func (b *benchSim) step() []float32 {
	b.num++
	b.now += 1e6
	slopes := make([]float32, len(b.sky))
	for i := range slopes {
		v := float64(b.sky[i])
		for j, c := range b.shown {
			v += b.im.At(i, j) * float64(c)
		}
		slopes[i] = float32(v)
	}
	f := &stillskyv1.StreamFramesResponse{FrameNumber: b.num, ChunkCount: 1, Slopes: slopes, ReadoutEndNs: b.now}
	if !b.rt.receive(f, b.now+1e4) {
		return nil
	}
	b.rt.delivered(f, b.now+1e4, b.now+2e4, b.now+3e4)
	copy(b.shown, b.rt.out.Values)
	return append([]float32(nil), b.rt.out.Values...)
}

// params builds a parameter set on the least-squares inverse of the bench's
// interaction matrix.
func (b *benchSim) params(gain float64) *controller.Params {
	b.t.Helper()
	r, err := controller.BuildReconstructor(b.im, controller.ReconstructorConfig{Method: controller.MethodTruncatedSVD, Created: time.Unix(0, 0)})
	if err != nil {
		b.t.Fatal(err)
	}
	p, err := controller.NewParams(controller.ParamsConfig{Reconstructor: r, Gain: gain, Leak: 0.01, Stroke: b.rt.g.stroke, StrehlWavelength: 1.65e-6})
	if err != nil {
		b.t.Fatal(err)
	}
	return p
}

// TestUnitFollowsTheControlLaw drives the unit frame by frame: open, the mirror
// is flat; closed, every command is what controller.Loop.Step computes from the
// same frames (the unit adds no control law of its own); on hold, the command
// stays; the snapshot counts every frame.
func TestUnitFollowsTheControlLaw(t *testing.T) {
	b := newBenchSim(t, 40, 12, Interlocks{})
	rng := rand.New(rand.NewPCG(5, 6))
	turbulence := func() {
		for i := range b.sky {
			b.sky[i] = float32(1e-6 * rng.NormFloat64())
		}
	}
	if err := b.u.install(b.params(0.3)); err != nil {
		t.Fatal(err)
	}
	for range 5 {
		turbulence()
		for j, v := range b.step() {
			if v != 0 {
				t.Fatalf("open loop: actuator %d at %g m, want flat", j, v)
			}
		}
	}
	ref, err := controller.NewLoop(b.params(0.3))
	if err != nil {
		t.Fatal(err)
	}
	refCmd := make([]float32, 12)
	b.u.request(stateClosed)
	for k := range 50 {
		turbulence()
		// The reference sees the frame the unit is about to see.
		shown := append([]float32(nil), b.shown...)
		slopes := make([]float32, 40)
		for i := range slopes {
			v := float64(b.sky[i])
			for j, c := range shown {
				v += b.im.At(i, j) * float64(c)
			}
			slopes[i] = float32(v)
		}
		if res := ref.Step(slopes, refCmd); !res.OK() {
			t.Fatalf("reference step %d: %v", k, res.Status)
		}
		got := b.step()
		for j := range got {
			if got[j] != refCmd[j] {
				t.Fatalf("closed frame %d, actuator %d: unit sent %g, controller.Loop.Step gives %g", k, j, got[j], refCmd[j])
			}
		}
	}
	if s := b.u.snapshot(); s.state != stateClosed || s.frames != 55 || s.rejected != 0 || s.dropped != 0 || s.trips != 0 {
		t.Fatalf("snapshot %+v: want closed, 55 frames, none rejected, dropped or tripped", s)
	}
	b.u.request(stateHold)
	held := b.step()
	for range 5 {
		turbulence()
		for j, v := range b.step() {
			if v != held[j] {
				t.Fatalf("hold: actuator %d moved from %g to %g m", j, held[j], v)
			}
		}
	}
	if s := b.u.snapshot(); s.state != stateHold {
		t.Fatalf("state %v, want hold", stateNames[s.state])
	}
}

// TestUnitTripsFlat closes the loop and then multiplies the slopes by 100: the
// divergence (or saturation) interlock trips, the state is tripped, the trip is
// in the snapshot, and the mirror goes flat.
func TestUnitTripsFlat(t *testing.T) {
	b := newBenchSim(t, 40, 12, Interlocks{})
	rng := rand.New(rand.NewPCG(7, 8))
	if err := b.u.install(b.params(0.3)); err != nil {
		t.Fatal(err)
	}
	sky := func(rms float64) {
		for i := range b.sky {
			b.sky[i] = float32(rms * rng.NormFloat64())
		}
	}
	for range 100 { // the open-loop slope level the divergence test compares with
		sky(1e-6)
		b.step()
	}
	b.u.request(stateClosed)
	sky(1e-6) // the first closed frame is uncorrected: it measures the sky too
	b.step()
	for k := 0; b.u.current() != stateTripped; k++ {
		if k == 200 {
			t.Fatal("no trip after 200 frames of slopes 100 times the open-loop level")
		}
		sky(1e-4)
		b.step()
	}
	for j, v := range b.rt.out.Values {
		if v != 0 {
			t.Fatalf("tripped: actuator %d at %g m, want flat", j, v)
		}
	}
	if s := b.u.snapshot(); s.trips != 1 || (s.lastTrip != tripDivergence && s.lastTrip != tripSaturation) {
		t.Fatalf("snapshot: %d trips, last %q; want one, divergence or saturation", s.trips, s.lastTrip)
	}
}

// TestUnitCalibratesFrameByFrame runs a push–pull calibration through the unit
// on the lockstep bench: the interaction matrix it measures is the bench's own,
// to float32 rounding (the pokes are linear and noise-free), and the loop is open
// afterwards. A second calibration is aborted by opening the loop.
func TestUnitCalibratesFrameByFrame(t *testing.T) {
	b := newBenchSim(t, 40, 12, Interlocks{})
	cc, _, err := calibrationSettings(&stillskyv1.CalibrateRequest{}, b.rt.g)
	if err != nil {
		t.Fatal(err)
	}
	start := func() *calibration {
		c, err := controller.NewCalibrator(cc)
		if err != nil {
			t.Fatal(err)
		}
		cal := &calibration{c: c, done: make(chan struct{}), block: cc.SettleFrames + cc.FramesPerPattern}
		if !b.u.startCalibration(cal) {
			t.Fatal("a calibration is already running")
		}
		b.u.request(stateCalibrating)
		return cal
	}
	finished := func(cal *calibration) bool {
		select {
		case <-cal.done:
			return true
		default:
			return false
		}
	}

	cal := start()
	_, total := cal.c.Progress()
	for k := 0; !finished(cal); k++ {
		if k > 2*total {
			t.Fatalf("calibration not done after %d frames (%d of %d consumed)", k, cal.progress.Load(), total)
		}
		b.step()
	}
	if !cal.c.Done() || b.u.current() != stateOpen {
		t.Fatalf("calibration done %v, state %v; want done and open", cal.c.Done(), stateNames[b.u.current()])
	}
	got, err := cal.c.InteractionMatrix()
	if err != nil {
		t.Fatal(err)
	}
	var diff mat.Dense
	diff.Sub(got, b.im)
	if rel := mat.Norm(&diff, 2) / mat.Norm(b.im, 2); rel > 1e-5 {
		t.Errorf("measured interaction matrix off by %.2g (relative, spectral norm), want <= 1e-5", rel)
	}

	cal = start()
	for range 5 {
		b.step()
	}
	b.u.request(stateOpen)
	b.step()
	if !finished(cal) || !cal.aborted.Load() || b.u.current() != stateOpen {
		t.Fatalf("after opening: calibration finished %v, aborted %v, state %v; want both and open", finished(cal), cal.aborted.Load(), stateNames[b.u.current()])
	}
	for j, v := range b.rt.out.Values {
		if v != 0 {
			t.Fatalf("aborted calibration: actuator %d at %g m, want flat", j, v)
		}
	}
}

// ProcessSettings raises the runtime's default GOGC of 100 to 400 and keeps any
// other value, as a GOGC in the environment sets it.
func TestProcessSettingsGC(t *testing.T) {
	old := debug.SetGCPercent(100)
	defer debug.SetGCPercent(old)
	for _, c := range []struct{ set, want int }{{100, gcPercent}, {250, 250}, {-1, -1}} {
		t.Run(fmt.Sprintf("GOGC %d", c.set), func(t *testing.T) {
			debug.SetGCPercent(c.set)
			ProcessSettings(Realtime{}, nil)
			if got := debug.SetGCPercent(c.set); got != c.want {
				t.Errorf("GOGC %d: %d after ProcessSettings, want %d", c.set, got, c.want)
			}
		})
	}
}
