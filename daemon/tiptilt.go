package daemon

import (
	"context"
	"errors"
	"fmt"
	"math"
	"runtime"
	"sync"
	"sync/atomic"
	"time"

	"google.golang.org/grpc"

	"stillsky/controller"
	"stillsky/internal/monoclock"
	"stillsky/internal/rpc"
	stillskyv1 "stillsky/proto/stillsky/v1"
)

// TipTiltConfig is the tip-tilt loop: a natural-star tip-tilt sensor (a
// Camera whose Describe says SENSOR_KIND_QUAD_CELL) drives a tip-tilt mirror
// (a Mirror with MIRROR_KIND_TIP_TILT) through controller.TipTilt, while the
// high-order loop runs on the main camera, whose slopes' own tip-tilt the
// reconstructor then ignores (controller.Reconstructor.WithoutSlopeTilt: a
// laser beacon's tip-tilt means nothing), and the deformable mirror's
// tip-tilt is offloaded to the tip-tilt mirror each frame
// (controller.TiltOffload). Both loops close, hold, open and trip together:
// the tip-tilt loop follows the high-order loop's state, and its interlocks
// (a silent tip-tilt sensor, a tip-tilt mirror at its stroke, an unreachable
// tip-tilt mirror) trip both.
type TipTiltConfig struct {
	// CameraAddr and MirrorAddr are the tip-tilt sensor's and the tip-tilt
	// mirror's gRPC addresses (required; they may be equal).
	CameraAddr, MirrorAddr string
	// Gain and Leak of the tip-tilt integrator: Gain in [0, 2), default 0.4;
	// Leak in [0, 1), default 0.
	Gain *float64
	Leak float64
	// OffloadGain is the fraction of the deformable mirror's tip-tilt moved to
	// the tip-tilt mirror per high-order frame, (0, 1]; default 0.05.
	OffloadGain float64
}

func (c *TipTiltConfig) setDefaults() error {
	if c == nil {
		return nil
	}
	if c.CameraAddr == "" || c.MirrorAddr == "" {
		return errors.New("daemon: tip-tilt camera and mirror addresses are both required")
	}
	if c.Gain == nil {
		g := 0.4
		c.Gain = &g
	}
	if c.OffloadGain == 0 {
		c.OffloadGain = 0.05
	}
	switch g := *c.Gain; {
	case !(g >= 0 && g < controller.MaxGain):
		return fmt.Errorf("daemon: tip-tilt gain %g: must be in [0, %g)", g, controller.MaxGain)
	case !(c.Leak >= 0 && c.Leak < 1):
		return fmt.Errorf("daemon: tip-tilt leak %g: must be in [0, 1)", c.Leak)
	case !(c.OffloadGain > 0 && c.OffloadGain <= 1):
		return fmt.Errorf("daemon: tip-tilt offload gain %g: must be in (0, 1]", c.OffloadGain)
	}
	return nil
}

// Tip-tilt interlock reasons (label values of stillsky_interlock_trips_total).
const (
	tripTipTiltStale       = "stale_tip_tilt_camera"
	tripTipTiltSaturation  = "tip_tilt_saturation"
	tripTipTiltUnreachable = "tip_tilt_mirror_unreachable"
)

// tiltInbox carries the tilt the high-order goroutine took off the
// deformable mirror to the tip-tilt goroutine, which adds it to the tip-tilt
// mirror's command at its next frame.
type tiltInbox struct {
	mu     sync.Mutex
	tx, ty float64
}

func (b *tiltInbox) add(tx, ty float64) {
	b.mu.Lock()
	b.tx += tx
	b.ty += ty
	b.mu.Unlock()
}

func (b *tiltInbox) take() (tx, ty float64) {
	b.mu.Lock()
	tx, ty, b.tx, b.ty = b.tx, b.ty, 0, 0
	b.mu.Unlock()
	return tx, ty
}

// tipTilt is the unit's tip-tilt part, shared by the two real-time
// goroutines: the high-order one offloads into inbox while live says the
// tip-tilt loop is closed and correcting; the tip-tilt one steps ctl.
type tipTilt struct {
	cfg TipTiltConfig
	// offload is built with each reconstructor (its tilt response), nil until
	// then or when the reconstructor corrects no tilt.
	offload atomic.Pointer[controller.TiltOffload]
	inbox   tiltInbox
	live    atomic.Bool
	// lastArrival is the CLOCK_MONOTONIC ns of the last valid tip-tilt frame;
	// stale the silence (ns) after which the watchdog trips, from the
	// sensor's Describe (one second until then).
	lastArrival, stale atomic.Int64
	// For the status: frames, commands and saturated frames counted; the
	// residual rms per axis over about a second of frames, the last command
	// and the stroke (radians, float64 bits); the devices connected.
	frames, commands, saturated  atomic.Uint64
	residual, cmdX, cmdY, stroke atomic.Uint64
	connected                    atomic.Bool
	// done is the number of the last high-order frame computed: a lockstep
	// tip-tilt loop takes its frame j only once the high-order loop has
	// computed frame j·ratio (see ttRealtime.await).
	done atomic.Uint64
}

// status is the tip-tilt loop's part of GetStatus.
func (tt *tipTilt) status() *stillskyv1.TipTiltStatus {
	f := func(a *atomic.Uint64) float64 { return math.Float64frombits(a.Load()) }
	s := &stillskyv1.TipTiltStatus{
		Connected: tt.connected.Load(), Frames: tt.frames.Load(), Commands: tt.commands.Load(),
		ResidualRmsRad: f(&tt.residual), CommandXRad: f(&tt.cmdX), CommandYRad: f(&tt.cmdY), StrokeRad: f(&tt.stroke),
		SaturatedFrames: tt.saturated.Load(), Gain: *tt.cfg.Gain,
	}
	if tt.offload.Load() != nil {
		s.OffloadGain = tt.cfg.OffloadGain
	}
	return s
}

// ttRealtime is the tip-tilt loop of one tip-tilt device session, driven
// frame by frame as realtime is (receive, then delivered).
type ttRealtime struct {
	u        *unit
	tt       *tipTilt
	ctl      *controller.TipTilt
	stroke   float64
	out      *stillskyv1.StreamCommandsRequest
	frame    *stillskyv1.StreamFramesResponse
	state    loopState
	last     uint64 // frame number of the last valid frame
	satN     int
	ms       float64 // exponential mean of (mx² + my²)/2
	alpha    float64
	ackBatch uint32
	// ratio is the high-order frames per tip-tilt frame of a lockstep bench
	// (0 free-running, or until known: no wait); ratioOf finds it once the
	// high-order devices are described (nil for a free-running sensor).
	ratio   uint64
	ratioOf func() uint64
}

func newTTRealtime(u *unit, tt *tipTilt, ctl *controller.TipTilt, frameRate float64) *ttRealtime {
	n := max(1, frameRate) // frames in about a second
	return &ttRealtime{
		u: u, tt: tt, ctl: ctl, stroke: ctl.Params().Stroke,
		out:      &stillskyv1.StreamCommandsRequest{Values: make([]float32, 2)},
		frame:    &stillskyv1.StreamFramesResponse{Slopes: make([]float32, 0, 2)},
		state:    stateOpen,
		alpha:    1 / n,
		ackBatch: uint32(max(1, min(maxAckBatch, int(math.Round(frameRate*ackWindow))))),
	}
}

// receive validates tip-tilt frame f (received at received), follows the
// high-order loop's state and leaves the tip-tilt mirror's command in t.out.
// It reports whether to send it: not for a refused frame (the mirror holds
// its last command).
func (t *ttRealtime) receive(f *stillskyv1.StreamFramesResponse, received int64) bool {
	m := t.u.m
	s := f.GetSlopes()
	switch num := f.GetFrameNumber(); {
	case len(s) != 2:
		m.ttRejLength.Inc()
		return false
	case !isFinite(s[0]) || !isFinite(s[1]):
		m.ttRejNonFinite.Inc()
		return false
	case num <= t.last && t.last != 0:
		m.ttRejOrder.Inc()
		return false
	default:
		t.last = num
	}
	t.tt.lastArrival.Store(received)
	t.tt.frames.Add(1)
	m.ttFrames.Inc()
	mx, my := float64(s[0]), float64(s[1])
	state := t.u.current()
	if state != t.state {
		// As the high-order loop does: a hold keeps the command, and closing
		// from a hold goes on from it; any other change starts from a flat
		// mirror, with nothing left to offload (the deformable mirror starts
		// flat too).
		if state != stateHold && (state != stateClosed || t.state != stateHold) {
			t.ctl.Reset()
			t.satN = 0
			t.tt.inbox.take()
		}
		t.state = state
	}
	var cx, cy float64
	saturated := false
	switch state {
	case stateClosed:
		if tx, ty := t.tt.inbox.take(); tx != 0 || ty != 0 {
			saturated = t.ctl.Offload(tx, ty)
		}
		var sat bool
		cx, cy, sat, _ = t.ctl.Step(mx, my)
		saturated = saturated || sat
		t.tt.live.Store(true)
		if saturated {
			m.ttSaturatedFrames.Inc()
			t.tt.saturated.Add(1)
			t.satN++
			if t.satN >= t.u.interlocks.SaturationFrames {
				t.u.tripFrom(stateClosed, tripTipTiltSaturation)
				t.satN = 0
			}
		} else {
			t.satN = 0
		}
	case stateHold:
		cx, cy = t.ctl.Command()
		t.tt.live.Store(false)
	default: // open, calibrating, tripped: the tip-tilt mirror flat
		t.tt.live.Store(false)
	}
	t.ms += t.alpha * ((mx*mx+my*my)/2 - t.ms)
	t.tt.residual.Store(math.Float64bits(math.Sqrt(t.ms)))
	m.ttFlux.Set(float64(f.GetFluxElectrons()))
	m.ttResidualX.Set(mx)
	m.ttResidualY.Set(my)
	m.ttResidualRMS.Set(math.Sqrt(t.ms))
	m.ttCommandX.Set(cx)
	m.ttCommandY.Set(cy)
	t.tt.cmdX.Store(math.Float64bits(cx))
	t.tt.cmdY.Store(math.Float64bits(cy))
	m.ttStrokeUsed.Set(max(math.Abs(cx), math.Abs(cy)) / t.stroke)
	if saturated {
		m.ttSaturated.Set(1)
	} else {
		m.ttSaturated.Set(0)
	}
	t.out.FrameNumber = f.GetFrameNumber()
	t.out.Values[0], t.out.Values[1] = float32(cx), float32(cy)
	t.out.AckBatch = t.ackBatch
	return true
}

// await makes a lockstep run frame-exact: a lockstep bench reads tip-tilt
// frame j out with high-order frame j·ratio and produces the next
// high-order frame only once the tip-tilt command for j is in, so waiting
// here until the high-order loop has computed frame j·ratio makes the state
// this frame sees, and the tilt offloaded before it, the same in every run.
// The wait is bounded (100 ms): a high-order loop that misses the frame
// must not stop the tip-tilt loop.
func (t *ttRealtime) await(j uint64) {
	if t.ratio == 0 && t.ratioOf != nil {
		t.ratio = t.ratioOf()
	}
	if t.ratio == 0 {
		return
	}
	want := j * t.ratio
	for deadline := monoclock.Now() + 100e6; t.tt.done.Load() < want && monoclock.Now() < deadline; {
		runtime.Gosched()
	}
}

// delivered counts a command sent.
func (t *ttRealtime) delivered() {
	t.u.m.ttCommands.Inc()
	t.tt.commands.Add(1)
}

func isFinite(v float32) bool { return !math.IsNaN(float64(v)) && !math.IsInf(float64(v), 0) }

// tripFrom trips the loop from state from (closed): the high-order goroutine
// enters the tripped state at its next frame and sends its safe shape. It
// reports whether it tripped.
func (u *unit) tripFrom(from loopState, reason string) bool {
	if !u.want.CompareAndSwap(int32(from), int32(stateTripped)) {
		return false
	}
	u.trip(reason)
	return true
}

// offloadTilt moves the offload fraction of the deformable mirror's tip-tilt
// in cmd, the closed loop's command just computed, onto the tip-tilt mirror:
// off cmd and the integrator's state, into the tip-tilt loop's inbox. It
// does nothing unless the tip-tilt loop is closed and correcting. It
// allocates nothing.
func (u *unit) offloadTilt(loop *controller.Loop, cmd []float32) {
	tt := u.tt
	if tt == nil || !tt.live.Load() {
		return
	}
	off := tt.offload.Load()
	if off == nil {
		return
	}
	tx, ty := off.Apply(cmd)
	if tx == 0 && ty == 0 {
		return
	}
	if loop.SetCommand(cmd) != nil {
		return
	}
	tt.inbox.add(tx, ty)
}

// tipTiltDevices keeps the tip-tilt device session up, as devices does for
// the main ones.
func (d *Daemon) tipTiltDevices(ctx context.Context) {
	backoff := 100 * time.Millisecond
	for ctx.Err() == nil {
		start := time.Now()
		err := d.tipTiltSession(ctx)
		if ctx.Err() != nil {
			return
		}
		if time.Since(start) > 5*time.Second {
			backoff = 100 * time.Millisecond
		}
		d.log.Warn("tip-tilt device session ended; reconnecting", "err", err, "backoff", backoff)
		select {
		case <-ctx.Done():
			return
		case <-time.After(backoff):
		}
		backoff = min(2*backoff, 5*time.Second)
	}
}

// tipTiltSession connects to the tip-tilt sensor and mirror, checks what
// their Describe says, and runs the tip-tilt loop until a device fails.
func (d *Daemon) tipTiltSession(ctx context.Context) error {
	c := d.u.tt.cfg
	camConn, err := rpc.Dial(c.CameraAddr, rpc.DeviceDialOptions()...)
	if err != nil {
		return err
	}
	defer camConn.Close()
	mirConn, err := rpc.Dial(c.MirrorAddr, rpc.DeviceDialOptions()...)
	if err != nil {
		return err
	}
	defer mirConn.Close()
	cam := stillskyv1.NewCameraServiceClient(camConn)
	mir := stillskyv1.NewMirrorServiceClient(mirConn)
	cd, err := cam.Describe(ctx, &stillskyv1.CameraServiceDescribeRequest{}, grpc.WaitForReady(true))
	if err != nil {
		return fmt.Errorf("tip-tilt camera describe: %w", err)
	}
	md, err := mir.Describe(ctx, &stillskyv1.MirrorServiceDescribeRequest{}, grpc.WaitForReady(true))
	if err != nil {
		return fmt.Errorf("tip-tilt mirror describe: %w", err)
	}
	if err := checkTipTiltDevices(cd, md); err != nil {
		return err
	}
	ctl, err := controller.NewTipTilt(controller.TipTiltParams{Gain: *c.Gain, Leak: c.Leak, Stroke: md.GetStrokeRad()})
	if err != nil {
		return err
	}
	d.m.ttFramePeriod.Set(1 / cd.GetFrameRateHz())
	d.m.ttStroke.Set(md.GetStrokeRad())
	d.u.tt.stroke.Store(math.Float64bits(md.GetStrokeRad()))
	d.log.Info("tip-tilt devices described", "frame_rate_hz", cd.GetFrameRateHz(), "star_magnitude", cd.GetStarMagnitude(),
		"stroke_rad", md.GetStrokeRad(), "camera", cd.GetDescription())

	sctx, cancel := context.WithCancel(ctx)
	defer cancel()
	frames, err := cam.StreamFrames(sctx, &stillskyv1.StreamFramesRequest{}, rpc.FrameCodecOption())
	if err != nil {
		return fmt.Errorf("tip-tilt camera stream: %w", err)
	}
	cmds, err := mir.StreamCommands(sctx, rpc.FrameCodecOption())
	if err != nil {
		return fmt.Errorf("tip-tilt mirror stream: %w", err)
	}
	period := time.Duration(float64(time.Second) / cd.GetFrameRateHz())
	stale := time.Duration(d.cfg.Interlocks.StalePeriods) * period
	if cd.GetLockstep() {
		stale = max(stale, time.Second)
	}
	d.u.tt.stale.Store(int64(stale))
	ackErr := make(chan error, 1)
	go func() { ackErr <- discardAcks(cmds) }()
	rt := newTTRealtime(d.u, d.u.tt, ctl, cd.GetFrameRateHz())
	if cd.GetLockstep() {
		rt.ratioOf = func() uint64 {
			if g := d.geometry(); g != nil && g.lockstep {
				return uint64(max(1, math.Round(g.frameRate/cd.GetFrameRateHz())))
			}
			return 0
		}
	}
	d.u.tt.connected.Store(true)
	err = rt.run(ctx, frames, cmds)
	d.u.tt.connected.Store(false)
	cancel()
	<-ackErr
	d.u.tt.live.Store(false)
	return err
}

// checkTipTiltDevices refuses devices that are not a tip-tilt sensor and a
// tip-tilt mirror.
func checkTipTiltDevices(cd *stillskyv1.CameraServiceDescribeResponse, md *stillskyv1.MirrorServiceDescribeResponse) error {
	switch {
	case cd.GetSensorKind() != stillskyv1.SensorKind_SENSOR_KIND_QUAD_CELL || cd.GetSlopeCount() != 2:
		return fmt.Errorf("tip-tilt camera is a %v with %d slopes: want a quad cell with 2", cd.GetSensorKind(), cd.GetSlopeCount())
	case !(cd.GetFrameRateHz() > 0) || math.IsInf(cd.GetFrameRateHz(), 0):
		return fmt.Errorf("tip-tilt camera frame rate %g Hz: must be finite and > 0", cd.GetFrameRateHz())
	case md.GetMirrorKind() != stillskyv1.MirrorKind_MIRROR_KIND_TIP_TILT || md.GetActuatorCount() != 2:
		return fmt.Errorf("tip-tilt mirror is a %v with %d actuators: want a tip-tilt mirror with 2", md.GetMirrorKind(), md.GetActuatorCount())
	case !(md.GetStrokeRad() > 0) || math.IsInf(md.GetStrokeRad(), 0):
		return fmt.Errorf("tip-tilt mirror stroke %g rad: must be finite and > 0", md.GetStrokeRad())
	}
	return nil
}

// run is the tip-tilt real-time goroutine: receive a tilt frame, step, send.
func (t *ttRealtime) run(ctx context.Context, frames receiver, cmds sender) error {
	for {
		if err := frames.RecvMsg(t.frame); err != nil {
			return fmt.Errorf("tip-tilt camera stream: %w", err)
		}
		received := monoclock.Now()
		t.await(t.frame.GetFrameNumber())
		if !t.receive(t.frame, received) {
			continue
		}
		if err := cmds.SendMsg(t.out); err != nil {
			if s := t.u.current(); (s == stateClosed || s == stateHold) && ctx.Err() == nil {
				t.u.tripFrom(s, tripTipTiltUnreachable)
			}
			return fmt.Errorf("tip-tilt mirror stream: %w", err)
		}
		t.delivered()
	}
}

// discardAcks reads the tip-tilt mirror's acknowledgements until the stream ends.
func discardAcks(cmds receiver) error {
	ack := newAck()
	for {
		if err := cmds.RecvMsg(ack); err != nil {
			return err
		}
	}
}

// tipTiltWatchdog holds the loops when the tip-tilt sensor is quiet while
// they are closed — no frame since the later of its last one and the loop's
// closing, for longer than its stale time — or not connected at all. It runs
// until ctx ends.
func (u *unit) tipTiltWatchdog(ctx context.Context) {
	t := time.NewTicker(5 * time.Millisecond)
	defer t.Stop()
	var closedAt int64
	for {
		select {
		case <-ctx.Done():
			return
		case <-t.C:
		}
		if u.wanted() != stateClosed {
			closedAt = 0
			continue
		}
		now := monoclock.Now()
		if closedAt == 0 {
			closedAt = now
		}
		last := max(u.tt.lastArrival.Load(), closedAt)
		if quiet := now - last; quiet > u.tt.stale.Load() && u.holdIfClosed() {
			u.trip(tripTipTiltStale)
		}
	}
}
