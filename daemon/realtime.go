package daemon

import (
	"context"
	"fmt"
	"math"
	"runtime"
	"sync/atomic"

	"stillsky/controller"
	"stillsky/internal/monoclock"
	stillskyv1 "stillsky/proto/stillsky/v1"
)

// receiver and sender are the two halves of a device stream as the real-time
// loop uses them: receive the next message into m, send m. A gRPC stream is
// both; a test may drive the loop with anything that is.
type (
	receiver interface{ RecvMsg(m any) error }
	sender   interface{ SendMsg(m any) error }
)

// realtime is the real-time loop of one device session: it drives the unit frame
// by frame, and holds everything the real-time goroutine touches, allocated once
// per session so that a frame allocates nothing in the daemon's own code.
type realtime struct {
	u       *unit
	g       *geometry
	frame   *stillskyv1.StreamFramesResponse
	out     *stillskyv1.StreamCommandsRequest
	asm     assembler
	slopes  []float32 // the assembled frame (asm.slopes)
	cmd     []float32 // command being sent
	flat    []float32
	discard []float32 // the open-loop estimator's command, never sent
	sent    []float32 // the last command sent
	res     controller.Result
	state   loopState
	guard   guard
	// pipe is the loop multiplying the chunks of the frame being assembled as
	// they arrive (nil when not pipelining this frame).
	pipe *controller.Loop
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
	// lastE2E is the end-to-end latency of the newest command acknowledged,
	// ns (0 until one is): applyLag's stand-in while acknowledgements come in
	// batches, after the frames that would look for them.
	lastE2E atomic.Int64
	period  int64 // ns
	// lastLag is the previous frame's apply lag (applyLag), frames.
	lastLag int
	// ackBatch is how many commands the mirror may acknowledge at once outside
	// a calibration (mirror protocol version 2).
	ackBatch uint32
}

const readoutRing = 1024

// ackWindow is the time one batch of mirror acknowledgements spans at most,
// seconds: end-to-end latency reaches the metrics this much later, and the
// daemon's transport allocates per acknowledgement message, not per command —
// one object for a batch of 1 KiB or more (gRPC reads it into a pooled
// buffer), four for a shorter one; a quarter second at 1 kHz is 250 commands,
// about 3.7 kB.
const ackWindow = 0.25

// maxAckBatch bounds a batch of acknowledgements, well inside readoutRing so
// that a command's readout time is still known when its acknowledgement comes.
const maxAckBatch = 256

func newRealtime(u *unit, g *geometry) *realtime {
	rt := &realtime{
		u: u, g: g,
		frame:   &stillskyv1.StreamFramesResponse{Slopes: make([]float32, 0, g.slopes)},
		out:     &stillskyv1.StreamCommandsRequest{},
		asm:     newAssembler(g.slopes),
		cmd:     make([]float32, g.actuators),
		flat:    make([]float32, g.actuators),
		discard: make([]float32, g.actuators),
		sent:    make([]float32, g.actuators),
		state:   u.current(),
		lastLag: 2,
		guard:   guard{cfg: u.interlocks},
		staleNs: int64(2e9 / g.frameRate),
		period:  int64(1e9 / g.frameRate),
		// A batch spans ackWindow; at 1 kHz that is 250 commands.
		ackBatch: uint32(max(1, min(maxAckBatch, int(math.Round(g.frameRate*ackWindow))))),
	}
	if g.pixels != nil {
		rt.asm.px = newPixelFrames(g.pixels, u.pixCal.Load)
		rt.frame.Pixels = make([]byte, 0, 2*g.pixels.width*g.pixels.height)
	}
	rt.slopes = rt.asm.slopes
	rt.out.Values = rt.cmd
	u.telemetry.init(g.slopes, g.actuators, g.frameRate)
	return rt
}

// run is the real-time goroutine: receive a frame, compute, send. Nothing else
// runs here. With affinity, SCHED_FIFO or spinning asked for in threads, it
// runs on one locked OS thread that carries them. Without, it stays unlocked:
// a locked goroutine costs a thread wake-up (a futex and a context switch) each
// time the transport hands it a frame and each time it hands the transport a
// command, where an unlocked one runs next on the transport's own thread.
func (rt *realtime) run(ctx context.Context, threads Realtime, frames receiver, cmds sender) error {
	if threads.Pin || threads.FIFOPriority > 0 || threads.Spin > 0 {
		runtime.LockOSThread()
		if !threads.applyToThread(rt.u.log) {
			// A thread whose affinity or policy changed stays locked, so the
			// runtime ends it with this goroutine instead of reusing it.
			defer runtime.UnlockOSThread()
		}
	}
	next := func() (*stillskyv1.StreamFramesResponse, error) { return rt.frame, frames.RecvMsg(rt.frame) }
	done := func(*stillskyv1.StreamFramesResponse) {}
	if threads.Spin > 0 {
		p := newPoller(frames, rt.frame, int64(threads.Spin))
		defer p.stop()
		next, done = p.next, p.done
	}
	for {
		f, err := next()
		if err != nil {
			return fmt.Errorf("camera stream: %w", err)
		}
		received := monoclock.Now()
		if !rt.receive(f, received) {
			done(f)
			continue
		}
		computed := monoclock.Now()
		if err := cmds.SendMsg(rt.out); err != nil {
			if s := rt.state; (s == stateClosed || s == stateHold) && ctx.Err() == nil {
				rt.u.trip(tripMirrorUnreachable)
			}
			return fmt.Errorf("mirror stream: %w", err)
		}
		rt.delivered(f, received, computed, monoclock.Now())
		done(f)
	}
}

// poller receives the camera stream on a goroutine of its own, into two
// messages used in turn, and hands each to the real-time goroutine, which
// polls for it for up to spin ns before it blocks on the hand-over. A frame
// received while the real-time goroutine polls is taken on its running
// thread: no thread or vCPU has to wake for it. Steady, it allocates nothing.
type poller struct {
	frames receiver
	spin   int64
	ready  chan polled // frames received, or the stream's error
	free   chan *stillskyv1.StreamFramesResponse
	quit   chan struct{}
}

// polled is a frame the poller received, or the stream's error.
type polled struct {
	f   *stillskyv1.StreamFramesResponse
	err error
}

func newPoller(frames receiver, first *stillskyv1.StreamFramesResponse, spin int64) *poller {
	p := &poller{frames: frames, spin: spin, ready: make(chan polled, 2),
		free: make(chan *stillskyv1.StreamFramesResponse, 2), quit: make(chan struct{})}
	p.free <- first
	p.free <- &stillskyv1.StreamFramesResponse{Slopes: make([]float32, 0, cap(first.Slopes))}
	go p.receive()
	return p
}

// receive is the poller's goroutine: it ends at the stream's first error
// (the session cancels the stream when the real-time loop returns).
func (p *poller) receive() {
	for {
		var f *stillskyv1.StreamFramesResponse
		select {
		case f = <-p.free:
		case <-p.quit:
			return
		}
		err := p.frames.RecvMsg(f)
		p.ready <- polled{f, err}
		if err != nil {
			return
		}
	}
}

// next returns the next frame: polled for up to spin, then waited for.
func (p *poller) next() (*stillskyv1.StreamFramesResponse, error) {
	for deadline := monoclock.Now() + p.spin; monoclock.Now() < deadline; {
		select {
		case r := <-p.ready:
			return r.f, r.err
		default:
		}
	}
	r := <-p.ready
	return r.f, r.err
}

// done hands a frame's message back for the next receive.
func (p *poller) done(f *stillskyv1.StreamFramesResponse) { p.free <- f }

// stop ends the poller's goroutine once its receive returns.
func (p *poller) stop() { close(p.quit) }

// receive takes one message of the camera stream, received at time received
// (CLOCK_MONOTONIC ns): it assembles and validates the frame, counts it, applies
// the requested state and computes the command into rt.out. It reports whether
// that command is to be sent: not for a chunk of a frame still incomplete, a
// refused frame, or a frame skipped as late. The caller sends rt.out and then
// calls delivered.
func (rt *realtime) receive(f *stillskyv1.StreamFramesResponse, received int64) bool {
	u, m := rt.u, rt.u.m
	a := rt.asm.add(f)
	if a.pixels {
		if c := u.capture.Load(); c != nil {
			c.add(rt.asm.px.frame)
		}
	}
	if a.abandoned {
		rt.reject(refusedLength)
	}
	switch {
	case a.verdict == chunkIgnored:
		return false
	case a.verdict.refused():
		rt.reject(a.verdict)
		return false
	}
	if a.from == 0 {
		rt.pipe = nil
		if loop := u.loop.Load(); f.GetChunkCount() > 1 && loop != nil && rt.state == stateClosed && u.wanted() == stateClosed {
			rt.pipe = loop
		}
	}
	if rt.pipe != nil {
		rt.pipe.StepChunk(rt.slopes, a.from, a.to)
	}
	if a.verdict != frameComplete {
		return false
	}
	// Only a frame that passed validation is a sign of life for the
	// stale-camera watchdog.
	u.stats.lastArrival.Store(received)
	num := f.GetFrameNumber()
	m.frames.Inc()
	u.stats.frames.Add(1)
	u.stats.lastFrame.Store(num)
	u.stats.flux.Store(rt.asm.flux)
	m.flux.Set(rt.asm.flux)

	if a.dropped > 0 {
		m.dropped.Add(float64(a.dropped))
		u.stats.dropped.Add(a.dropped)
	}
	if rt.behind(f, received) {
		m.dropped.Inc()
		u.stats.dropped.Add(1)
		return false
	}
	slot := num % readoutRing
	rt.acked[slot].Store(0)
	rt.readout[slot].Store(f.GetReadoutEndNs())
	rt.tags[slot].Store(num)
	if a := u.auto; a != nil {
		a.step(u, num, rt.g.frameRate, rt.asm.flux, rt.state)
		rt.res = rt.compute(f)
		a.settle(num, rt.g.frameRate, rt.state)
	} else {
		rt.res = rt.compute(f)
	}
	if tt := u.tt; tt != nil {
		tt.done.Store(num)
	}
	rt.out.FrameNumber = num
	rt.out.AckBatch = rt.ackBatch
	if rt.state == stateCalibrating {
		// A free-running calibration counts a frame only once the mirror has
		// acknowledged its pattern (showsBlock): it needs every
		// acknowledgement at once.
		rt.out.AckBatch = 1
	}
	return true
}

// delivered records that the command computed for frame f (received at
// received, computed at computed) was sent at sent: latency, the frame's
// estimates, telemetry.
func (rt *realtime) delivered(f *stillskyv1.StreamFramesResponse, received, computed, sent int64) {
	u, m, res := rt.u, rt.u.m, rt.res
	copy(rt.sent, rt.cmd)
	m.commands.Inc()
	m.compute.Observe(float64(computed-received) * 1e-9)
	m.rtc.Observe(float64(sent-received) * 1e-9)
	u.stats.rtc.add(sent - received)
	if rec := u.recorder; rec != nil {
		rec.frame(received, received-f.GetReadoutEndNs(), computed-received, sent-received)
	}
	rt.publish(res)
	rt.lastLag = rt.applyLag(f)
	u.telemetry.record(f.GetFrameNumber(), rt.state, rt.slopes, rt.cmd, res, rt.lastLag, frameTimes{f.GetReadoutEndNs(), received, computed, sent})
}

// reject counts a refused frame.
func (rt *realtime) reject(v verdict) {
	m := rt.u.m
	switch v {
	case refusedNonFinite:
		m.rejNonFinite.Inc()
	case refusedDuplicate:
		m.rejDup.Inc()
	case refusedOrder:
		m.rejOrder.Inc()
	case refusedPixelCount:
		m.rejPixelCount.Inc()
	case refusedChunkLayout:
		m.rejChunkLayout.Inc()
	case refusedDeadRow:
		m.rejDeadRow.Inc()
	case refusedSaturated:
		m.rejSaturated.Inc()
	case refusedHotPixel:
		m.rejHotPixel.Inc()
	default:
		m.rejLength.Inc()
	}
	rt.u.stats.rejected.Add(1)
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
func (rt *realtime) compute(f *stillskyv1.StreamFramesResponse) controller.Result {
	u := rt.u
	if want := u.wanted(); want != rt.state {
		rt.enter(want)
	}
	loop := u.loop.Load()
	var res controller.Result
	switch rt.state {
	case stateCalibrating:
		res = rt.calibrate(f)
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
			u.want.CompareAndSwap(int32(stateClosed), int32(stateTripped))
			u.trip(reason)
			rt.enter(stateTripped)
			// The diverging command of this frame is never sent: the safe shape
			// starts from the last command the mirror received.
			copy(rt.cmd, rt.sent)
			rt.safeShape()
			break
		}
		u.offloadTilt(loop, rt.cmd)
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
		if est := u.estimator.Load(); est != nil {
			r := est.Step(rt.slopes, rt.discard)
			res.ResidualRMS, res.Strehl = r.ResidualRMS, r.Strehl
		}
	}
	return res
}

// enter performs the side effects of a state change requested by the Control API.
func (rt *realtime) enter(s loopState) {
	u := rt.u
	loop := u.loop.Load()
	if rt.state == stateCalibrating {
		// A calibration left on request (opening the loop aborts it) is handed
		// back like a finished one, so that its driver returns and another can
		// start.
		if cal := u.cal.Load(); cal != nil {
			close(cal.done)
			u.cal.Store(nil)
		}
	}
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
	u.setState(s)
}

// safeShape writes the command of an open or tripped loop: flat, or with a trip
// decay configured a tripped loop decays from the last command sent.
func (rt *realtime) safeShape() {
	b := float32(rt.guard.cfg.TripDecay)
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

// publish records the frame's estimates for the metrics and the status.
func (rt *realtime) publish(res controller.Result) {
	u, m := rt.u, rt.u.m
	if !res.OK() {
		switch res.Status {
		case controller.StatusNonFinite:
			m.rejNonFinite.Inc()
		default:
			m.rejLength.Inc()
		}
		u.stats.rejected.Add(1)
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
	u.stats.store(res)
}

// newAck is an acknowledgement message with room for a whole batch, so that
// reading one into it allocates nothing.
func newAck() *stillskyv1.StreamCommandsResponse {
	return &stillskyv1.StreamCommandsResponse{
		EarlierFrameNumbers: make([]uint64, 0, maxAckBatch),
		EarlierReceivedNs:   make([]int64, 0, maxAckBatch),
		EarlierClipped:      make([]uint32, 0, maxAckBatch),
	}
}

// acks reads the mirror's acknowledgements, one per command or in batches
// (the earlier_* lists, protocol version 2), and turns them into end-to-end
// latency.
func (rt *realtime) acks(cmds receiver) error {
	ack := newAck()
	for {
		if err := cmds.RecvMsg(ack); err != nil {
			return err
		}
		nums, ats := ack.GetEarlierFrameNumbers(), ack.GetEarlierReceivedNs()
		for i := range min(len(nums), len(ats)) { // equal, as the codec checks
			rt.acknowledged(nums[i], ats[i])
		}
		rt.acknowledged(ack.GetFrameNumber(), ack.GetReceivedNs())
	}
}

// acknowledged records that the mirror received the command answering frame
// num at time at (its CLOCK_MONOTONIC ns).
func (rt *realtime) acknowledged(num uint64, at int64) {
	slot := num % readoutRing
	if rt.tags[slot].Load() != num {
		return
	}
	rt.acked[slot].Store(at)
	readout := rt.readout[slot].Load()
	e2e := at - readout
	if e2e < 0 {
		return
	}
	rt.lastE2E.Store(e2e)
	rt.u.m.endToEnd.Observe(float64(e2e) * 1e-9)
	rt.u.stats.e2e.add(e2e)
	if rec := rt.u.recorder; rec != nil {
		rec.endToEnd(readout, e2e)
	}
}
