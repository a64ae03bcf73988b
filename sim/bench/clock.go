package bench

import (
	"context"
	"runtime"
	"time"

	"golang.org/x/sys/unix"

	"stillsky/internal/affinity"
	"stillsky/internal/monoclock"
)

// Run keeps the bench's time until ctx ends: in free-run mode a frame every frame
// period, in lockstep mode a frame whenever the loop has answered.
func (b *Server) Run(ctx context.Context) error {
	sctx, stop := context.WithCancel(ctx)
	defer stop()
	go b.science(sctx)
	if !b.opt.Lockstep {
		b.freeRun(ctx)
		return nil
	}
	for k := uint64(1); ctx.Err() == nil; k++ {
		if err := b.awaitCommand(ctx, k); err != nil {
			return err
		}
		if b.opt.Gated {
			if err := b.gated(ctx, k); err != nil {
				return err
			}
			continue
		}
		b.produce(k, k, true)
	}
	return nil
}

// freeRun is the free-running camera. Frame k is read out at tick k of the
// camera's clock and sees the mirror as it was at tick k−1 — the command that
// arrived last before that tick — which makes the loop delay exactly what the
// scenario's rate and the loop's latency make it, whenever this goroutine gets
// the CPU. The part of a frame that does not depend on the mirror (turbulence,
// the atmosphere's slopes, noise) is done one frame ahead; after tick k−1 only
// the mirror's part is added, and the frame waits in the ring for the camera
// stream, which sends it at tick k. The figures of merit come last.
//
// With pre-rendered frames and the sky selected, frame k is frame k of the
// set instead, copied into the ring: no physics, no figures. The clock's
// thread then stays at normal priority, since it takes almost no CPU time and
// an idle-priority thread on a busy machine would publish its frames late.
func (b *Server) freeRun(ctx context.Context) {
	if b.opt.IdlePriority && b.frames == nil {
		runtime.LockOSThread()
		if err := affinity.IdleThread(); err != nil {
			b.log.Warn("simulation thread stays at normal priority", "err", err)
		}
	}
	period := int64(b.sys.FramePeriod() * 1e9)
	cmd := make([]float32, len(b.cmd))
	b.mu.Lock()
	b.sys.Advance()
	b.mu.Unlock()
	tick := monoclock.Now()
	for k := uint64(1); ctx.Err() == nil; k++ {
		prev := tick
		tick += period
		if late := monoclock.Now() - tick; late > 10*period {
			// Far behind (an overloaded machine): resynchronise instead of bursting.
			tick = monoclock.Now()
		}
		if b.frames != nil && b.sky.Load() {
			if slot, publish := b.nextSlot(); publish {
				copy(slot.slopes, b.frames.Frame(k))
				copy(slot.flux, b.frames.flux)
				copy(slot.pixels, b.frames.Pixels(k))
				slot.number, slot.due = k, tick
				b.cam.ready <- b.cam.written
				b.cam.written++
			}
			b.metrics.frames.Inc()
			sleepUntil(tick)
			continue
		}
		b.commandAt(prev, cmd)
		slot, publish := b.nextSlot()
		b.mu.Lock()
		b.sys.Observe(cmd, slot.slopes)
		copy(slot.flux, b.sys.Flux())
		if b.tt != nil {
			b.tt.integrate(b, k)
		}
		b.mu.Unlock()
		if publish {
			b.renderPixels(slot)
			slot.number, slot.due = k, tick
			b.cam.ready <- b.cam.written
			b.cam.written++
		}
		b.figures(k, true)
		b.mu.Lock()
		b.sys.Advance()
		b.mu.Unlock()
		sleepUntil(tick)
	}
}

// awaitCommand blocks, in lockstep mode, until the command for frame k−d has
// arrived (or the timeout passes, or no camera consumer is connected).
func (b *Server) awaitCommand(ctx context.Context, k uint64) error {
	d := uint64(b.opt.DelayFrames)
	for !b.cam.busy.Load() {
		select {
		case <-ctx.Done():
			return ctx.Err()
		case <-time.After(10 * time.Millisecond):
		}
	}
	if k <= d {
		return nil
	}
	deadline := time.NewTimer(b.opt.LockstepTimeout)
	defer deadline.Stop()
	if b.tt != nil {
		timedOut, err := b.tt.awaitCommand(ctx, k, d, deadline.C)
		if err != nil {
			return err
		}
		if timedOut {
			b.metrics.lockstepTimeouts.Inc()
			return nil
		}
	}
	for b.mir.lastFrame.Load() < k-d {
		select {
		case <-ctx.Done():
			return ctx.Err()
		case <-b.mir.arrived:
		case <-deadline.C:
			b.metrics.lockstepTimeouts.Inc()
			return nil
		}
	}
	return nil
}

// produce simulates lockstep frame k with the command that answered frame
// k−DelayFrames and hands it to the camera stream at once. The science camera
// samples it when n, its index (on the sky, with a gated bench), is a multiple
// of StrehlEvery and sample is set.
func (b *Server) produce(k, n uint64, sample bool) {
	slot, publish := b.nextSlot()
	b.mu.Lock()
	if d := uint64(b.opt.DelayFrames); k > d {
		if p := &b.pending[(k-d)%pendingRing]; p.frame == k-d {
			copy(b.cmd, p.values)
			b.sys.SetCommand(b.cmd)
		}
	}
	if b.tt != nil {
		b.tt.applyPending(b, k, uint64(b.opt.DelayFrames))
	}
	b.sys.Frame(slot.slopes)
	copy(slot.flux, b.sys.Flux())
	if b.tt != nil {
		b.tt.integrate(b, k)
	}
	b.mu.Unlock()
	if publish {
		b.renderPixels(slot)
		slot.number, slot.due = k, 0
		b.cam.ready <- b.cam.written
		b.cam.written++
	}
	b.figures(n, sample)
}

// renderPixels renders a published slot's detector frame in pixel mode, from
// its noise-free slopes; a slope camera's slot is left as it is.
func (b *Server) renderPixels(slot *frameSlot) {
	if b.px != nil {
		b.px.render(slot.pixels, slot.slopes)
	}
}

// waitUntil blocks until CLOCK_MONOTONIC reaches t: an absolute clock_nanosleep
// for the bulk, then a short spin. Go's own timers wake through the network
// poller, whose waits are whole milliseconds: measured here, a 700 µs
// time.Sleep overslept by 410 µs at the median, clock_nanosleep by 87 µs.
func waitUntil(t int64) {
	const spin = 100 * time.Microsecond
	if monoclock.Now() < t-int64(spin) {
		sleepUntil(t - int64(spin))
	}
	for monoclock.Now() < t {
	}
}

// sleepUntil blocks until CLOCK_MONOTONIC reaches t, without the spin of
// waitUntil: for a thread whose wake-up may be late but never early.
func sleepUntil(t int64) {
	ts := unix.NsecToTimespec(t)
	for unix.ClockNanosleep(unix.CLOCK_MONOTONIC, unix.TIMER_ABSTIME, &ts, nil) == unix.EINTR {
	}
}
