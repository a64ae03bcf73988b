package daemon

import (
	"context"
	"fmt"
	"runtime"
	"sync/atomic"

	"google.golang.org/grpc"

	"stillsky/controller"
	"stillsky/internal/monoclock"
	stillskyv1 "stillsky/proto/stillsky/v1"
)

// realtime holds everything the real-time goroutine touches, allocated once per
// session so that a frame allocates nothing in the daemon's own code.
type realtime struct {
	d       *Daemon
	g       *geometry
	frame   *stillskyv1.StreamFramesResponse
	out     *stillskyv1.StreamCommandsRequest
	slopes  []float32 // assembled frame
	cmd     []float32 // command being sent
	flat    []float32
	discard []float32 // the open-loop estimator's command, never sent
	sent    []float32 // the last command sent
	next    int       // next slope index expected in a chunked frame
	lastNum uint64
	state   loopState
	guard   guard
	// The frame being assembled from chunks, and the loop multiplying its chunks
	// as they arrive (nil when not pipelining this frame).
	assembling uint64
	pipe       *controller.Loop
	// staleNs is the age at which a frame counts as late; skipped says whether
	// the previous frame was skipped for it.
	staleNs int64
	skipped bool
	// readout times of recent frames by frame number, for end-to-end latency,
	// and the mirror's receive time of the command answering each (0 until
	// acknowledged).
	readout [readoutRing]atomic.Int64
	tags    [readoutRing]atomic.Uint64
	acked   [readoutRing]atomic.Int64
	period  int64 // ns
}

const readoutRing = 1024

func newRealtime(d *Daemon, g *geometry) *realtime {
	rt := &realtime{
		d: d, g: g,
		frame:   &stillskyv1.StreamFramesResponse{Slopes: make([]float32, 0, g.slopes)},
		out:     &stillskyv1.StreamCommandsRequest{},
		slopes:  make([]float32, g.slopes),
		cmd:     make([]float32, g.actuators),
		flat:    make([]float32, g.actuators),
		discard: make([]float32, g.actuators),
		sent:    make([]float32, g.actuators),
		state:   loopState(d.state.Load()),
		guard:   guard{cfg: d.cfg.Interlocks},
		staleNs: int64(2e9 / g.frameRate),
		period:  int64(1e9 / g.frameRate),
	}
	rt.out.Values = rt.cmd
	d.telemetry.init(g.slopes, g.actuators)
	return rt
}

// run is the real-time goroutine: receive a frame, compute, send. Nothing else
// runs here. With affinity or SCHED_FIFO asked for, it runs on one locked OS
// thread that carries them. Without, it stays unlocked: a locked goroutine
// costs a thread wake-up (a futex and a context switch) each time the transport
// hands it a frame and each time it hands the transport a command, where an
// unlocked one runs next on the transport's own thread.
func (rt *realtime) run(ctx context.Context, frames grpc.ServerStreamingClient[stillskyv1.StreamFramesResponse], cmds grpc.BidiStreamingClient[stillskyv1.StreamCommandsRequest, stillskyv1.StreamCommandsResponse]) error {
	d, m := rt.d, rt.d.m
	if r := d.cfg.Realtime; r.Pin || r.FIFOPriority > 0 {
		runtime.LockOSThread()
		if !d.threadSettings() {
			// A thread whose affinity or policy changed stays locked, so the
			// runtime ends it with this goroutine instead of reusing it.
			defer runtime.UnlockOSThread()
		}
	}
	for {
		if err := frames.RecvMsg(rt.frame); err != nil {
			return fmt.Errorf("camera stream: %w", err)
		}
		received := monoclock.Now()
		f := rt.frame
		complete, ok := rt.assemble(f)
		if !ok || !complete {
			continue
		}
		// Only a frame that passed validation is a sign of life for the
		// stale-camera watchdog.
		d.stats.lastArrival.Store(received)
		num := f.GetFrameNumber()
		m.frames.Inc()
		d.stats.frames.Add(1)
		d.stats.lastFrame.Store(num)
		if gap := num - rt.lastNum; rt.lastNum != 0 && gap > 1 {
			m.dropped.Add(float64(gap - 1))
			d.stats.dropped.Add(gap - 1)
		}
		rt.lastNum = num
		if rt.behind(f, received) {
			m.dropped.Inc()
			d.stats.dropped.Add(1)
			continue
		}
		slot := num % readoutRing
		rt.acked[slot].Store(0)
		rt.readout[slot].Store(f.GetReadoutEndNs())
		rt.tags[slot].Store(num)

		res := rt.compute()
		computed := monoclock.Now()
		rt.out.FrameNumber = num
		if err := cmds.SendMsg(rt.out); err != nil {
			if s := rt.state; (s == stateClosed || s == stateHold) && ctx.Err() == nil {
				d.trip(tripMirrorUnreachable)
			}
			return fmt.Errorf("mirror stream: %w", err)
		}
		sent := monoclock.Now()
		copy(rt.sent, rt.cmd)
		m.commands.Inc()
		m.compute.Observe(float64(computed-received) * 1e-9)
		m.rtc.Observe(float64(sent-received) * 1e-9)
		d.stats.rtc.add(sent - received)
		if rec := d.cfg.Recorder; rec != nil {
			rec.frame(received, received-f.GetReadoutEndNs(), computed-received, sent-received)
		}
		rt.publish(res)
		d.telemetry.record(num, rt.state, rt.slopes, rt.cmd, res.SlopeRMS, res.ResidualRMS, res.Strehl, res.Saturated, float64(sent-received)*1e-9)
	}
}

// behind reports whether to skip a frame that arrived more than two periods after
// its readout while the loop is closed: the loop has fallen behind a
// free-running camera, and correcting with stale frames would only add delay. It
// never skips two in a row, so a uniformly slow link still gets every other frame
// corrected; lockstep cameras wait for the loop, and calibration needs every frame.
func (rt *realtime) behind(f *stillskyv1.StreamFramesResponse, received int64) bool {
	if rt.g.lockstep || rt.skipped || rt.state != stateClosed || received-f.GetReadoutEndNs() <= rt.staleNs {
		rt.skipped = false
		return false
	}
	rt.skipped = true
	return true
}

// compute applies the loop state to the assembled frame and leaves the command to
// send in rt.cmd.
func (rt *realtime) compute() controller.Result {
	d := rt.d
	want := loopState(d.want.Load())
	if want != rt.state {
		rt.enter(want)
	}
	loop := d.loopPtr.Load()
	var res controller.Result
	switch rt.state {
	case stateCalibrating:
		cal := d.cal.Load()
		if cal == nil || cal.aborted.Load() {
			rt.finishCalibration(cal)
			copy(rt.cmd, rt.flat)
			break
		}
		if cal.started && rt.showsBlock(cal, rt.frame) {
			// The frame was validated by assemble, so Feed cannot refuse it.
			_ = cal.c.Feed(rt.slopes)
			cal.progress.Store(int64(progressOf(cal.c)))
		}
		if done, _ := cal.c.Progress(); !cal.started || done%cal.block == 0 && done != cal.blockAt {
			cal.blockAt, cal.blockFrame, cal.waited = done, rt.frame.GetFrameNumber(), 0
		}
		cal.started = true
		if cal.c.Done() {
			rt.finishCalibration(cal)
			copy(rt.cmd, rt.flat)
			break
		}
		cal.c.Command(rt.cmd)
		res.SlopeRMS = rms32(rt.slopes)
	case stateClosed:
		if loop == nil {
			copy(rt.cmd, rt.flat)
			break
		}
		if rt.pipe == loop {
			res = loop.Finish(rt.cmd)
		} else {
			res = loop.Step(rt.slopes, rt.cmd)
		}
		if !res.OK() {
			break
		}
		if reason := rt.guard.check(res, rt.g.actuators); reason != "" {
			d.want.CompareAndSwap(int32(stateClosed), int32(stateTripped))
			d.trip(reason)
			rt.enter(stateTripped)
			// The diverging command of this frame is never sent: the safe shape
			// starts from the last command the mirror received.
			copy(rt.cmd, rt.sent)
			rt.safeShape()
		}
	case stateHold:
		// The mirror keeps the last command; estimates still come from the frame.
		if loop != nil {
			loop.Command(rt.cmd)
		}
		res.SlopeRMS = rms32(rt.slopes)
	default: // open, tripped: the safe shape
		rt.safeShape()
		res.SlopeRMS = rms32(rt.slopes)
		if rt.state == stateOpen {
			rt.guard.observeOpen(res.SlopeRMS)
		}
		if est := d.estimator.Load(); est != nil {
			r := est.Step(rt.slopes, rt.discard)
			res.ResidualRMS, res.Strehl = r.ResidualRMS, r.Strehl
		}
	}
	return res
}

// enter performs the side effects of a state change requested by the Control API.
func (rt *realtime) enter(s loopState) {
	d := rt.d
	loop := d.loopPtr.Load()
	switch s {
	case stateClosed:
		if loop != nil && rt.state != stateHold {
			loop.Reset()
		}
		rt.guard.closing()
	case stateOpen, stateTripped:
		if loop != nil {
			loop.Reset()
		}
		rt.guard.opening()
	}
	rt.state = s
	d.setState(s)
}

// safeShape writes the command of an open or tripped loop: flat, or with a trip
// decay configured a tripped loop decays from the last command sent.
func (rt *realtime) safeShape() {
	b := float32(rt.d.cfg.Interlocks.TripDecay)
	if rt.state != stateTripped || b == 0 {
		copy(rt.cmd, rt.flat)
		return
	}
	// rt.cmd still holds the previous command.
	keep := 1 - b
	for i, v := range rt.cmd {
		rt.cmd[i] = keep * v
	}
}

func (rt *realtime) finishCalibration(cal *calibration) {
	d := rt.d
	if cal != nil {
		close(cal.done)
		d.cal.Store(nil)
	}
	d.want.CompareAndSwap(int32(stateCalibrating), int32(stateOpen))
	rt.state = stateOpen
	rt.guard.opening()
	d.setState(stateOpen)
}

func progressOf(c *controller.Calibrator) int {
	done, _ := c.Progress()
	return done
}

// publish records the frame's estimates for the metrics and the status.
func (rt *realtime) publish(res controller.Result) {
	d, m := rt.d, rt.d.m
	if !res.OK() {
		switch res.Status {
		case controller.StatusNonFinite:
			m.rejNonFinite.Inc()
		default:
			m.rejLength.Inc()
		}
		d.stats.rejected.Add(1)
		return
	}
	m.slopeRMS.Set(res.SlopeRMS)
	m.wavefrontRMS.Set(res.ResidualRMS)
	m.strehl.Set(res.Strehl)
	m.saturated.Set(float64(res.Saturated))
	var peak float32
	for _, v := range rt.cmd {
		peak = max(peak, v, -v)
	}
	m.strokeUsed.Set(float64(peak) / rt.g.stroke)
	d.stats.store(res)
}

// showsBlock reports whether frame f can show the command that began the
// current calibration block. Lockstep cameras guarantee it by their delay. A
// free-running camera shows at frame j the command that had reached the mirror
// by the readout before it, so a command that arrives late (a busy machine, a
// slow link) shows a frame or more later than the loop delay says: frame f
// counts only once the mirror has acknowledged the block's command at least a
// frame period before f's readout. The calibrator's settle frames then follow.
func (rt *realtime) showsBlock(cal *calibration, f *stillskyv1.StreamFramesResponse) bool {
	if rt.g.lockstep {
		return true
	}
	slot := cal.blockFrame % readoutRing
	if rt.tags[slot].Load() == cal.blockFrame {
		if at := rt.acked[slot].Load(); at != 0 && at <= f.GetReadoutEndNs()-rt.period {
			return true
		}
	}
	cal.waited++
	return cal.waited > maxCalibrationWait
}

// acks reads the mirror's acknowledgements and turns them into end-to-end latency.
func (rt *realtime) acks(cmds grpc.BidiStreamingClient[stillskyv1.StreamCommandsRequest, stillskyv1.StreamCommandsResponse]) error {
	ack := &stillskyv1.StreamCommandsResponse{}
	for {
		if err := cmds.RecvMsg(ack); err != nil {
			return err
		}
		num := ack.GetFrameNumber()
		slot := num % readoutRing
		if rt.tags[slot].Load() != num {
			continue
		}
		rt.acked[slot].Store(ack.GetReceivedNs())
		e2e := ack.GetReceivedNs() - rt.readout[slot].Load()
		if e2e < 0 {
			continue
		}
		rt.d.m.endToEnd.Observe(float64(e2e) * 1e-9)
		rt.d.stats.e2e.add(e2e)
		if rec := rt.d.cfg.Recorder; rec != nil {
			rec.endToEnd(e2e)
		}
	}
}
