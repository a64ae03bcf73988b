package daemon

import (
	"context"
	"sync"
	"sync/atomic"
	"time"

	"stillsky/controller"
	stillskyv1 "stillsky/proto/stillsky/v1"
)

// telemetryRing holds the newest frames' slopes, commands, estimates and
// timestamps for the telemetry stream, the live view and recordings. The
// real-time goroutine copies each frame into the next slot of a buffer allocated
// at the start of the device session and never waits: a slot a reader holds is
// skipped (that frame is lost to readers, and a recording that needed it fails),
// which happens only to a reader a whole ring behind.
type telemetryRing struct {
	buf atomic.Pointer[telemetryBuffer]
}

// telemetryBuffer is the ring of one device session.
type telemetryBuffer struct {
	slots []telemetrySlot
	// written counts the frames recorded; frame s (counting from 1) went to
	// slots[(s−1) % len(slots)].
	written atomic.Uint64
}

type telemetrySlot struct {
	mu  sync.Mutex
	seq uint64 // the sequence number held, 0 for none
	telemetrySample
}

// telemetrySample is one frame as the real-time goroutine saw it.
type telemetrySample struct {
	frame                   uint64
	state                   loopState
	slopes, cmd             []float32
	slopeRMS, wfRMS, strehl float64
	saturated               int
	// lag is how many frames before this one the command the mirror held
	// during its exposure was computed (the pseudo-open-loop slopes need it).
	lag int
	frameTimes
}

// frameTimes are the CLOCK_MONOTONIC times of one frame, nanoseconds: its readout
// end (the camera's stamp), its arrival, its command computed and sent.
type frameTimes struct {
	readout, received, computed, sent int64
}

// Bounds of a session's ring: at least ringMinFrames frames, and a second of
// frames at the camera's rate where that fits in ringMaxBytes.
const (
	ringMinFrames = 1024
	ringMaxBytes  = 64 << 20
	ringFloor     = 64
)

// ringFrames is the number of frames a session's ring holds.
func ringFrames(slopes, actuators int, rate float64) int {
	n := max(ringMinFrames, int(rate))
	per := 4*(slopes+actuators) + 128
	return max(ringFloor, min(n, ringMaxBytes/per))
}

// init gives the ring a new buffer for a session's geometry. Readers of the old
// one see it replaced and stop.
func (t *telemetryRing) init(slopes, actuators int, rate float64) {
	b := &telemetryBuffer{slots: make([]telemetrySlot, ringFrames(slopes, actuators, rate))}
	for i := range b.slots {
		b.slots[i].slopes = make([]float32, slopes)
		b.slots[i].cmd = make([]float32, actuators)
	}
	t.buf.Store(b)
}

// record copies one frame into the ring; it never blocks and allocates nothing.
func (t *telemetryRing) record(num uint64, s loopState, slopes, cmd []float32, res controller.Result, lag int, times frameTimes) {
	b := t.buf.Load()
	if b == nil {
		return
	}
	seq := b.written.Load() + 1
	slot := &b.slots[(seq-1)%uint64(len(b.slots))]
	if slot.mu.TryLock() {
		x := &slot.telemetrySample
		if len(x.slopes) == len(slopes) && len(x.cmd) == len(cmd) {
			copy(x.slopes, slopes)
			copy(x.cmd, cmd)
			x.frame, x.state, x.lag = num, s, lag
			x.slopeRMS, x.wfRMS, x.strehl, x.saturated = res.SlopeRMS, res.ResidualRMS, res.Strehl, res.Saturated
			x.frameTimes = times
			slot.seq = seq
		}
		slot.mu.Unlock()
	}
	b.written.Store(seq)
}

// readResult says what read found.
type readResult int

const (
	readOK      readResult = iota
	readNotYet             // the frame has not been recorded yet
	readOverrun            // the frame was overwritten, or skipped while held
)

// read copies frame seq (counting from 1) into dst, whose slices have the
// session's lengths.
func (b *telemetryBuffer) read(seq uint64, dst *telemetrySample) readResult {
	w := b.written.Load()
	if seq > w {
		return readNotYet
	}
	n := uint64(len(b.slots))
	if w-seq >= n {
		return readOverrun
	}
	slot := &b.slots[(seq-1)%n]
	slot.mu.Lock()
	defer slot.mu.Unlock()
	if slot.seq != seq {
		return readOverrun
	}
	s, d := &slot.telemetrySample, dst
	slopes, cmd := d.slopes, d.cmd
	*d = *s
	d.slopes, d.cmd = slopes[:copy(slopes, s.slopes)], cmd[:copy(cmd, s.cmd)]
	return readOK
}

// sample returns a sample with room for one frame of the session.
func (b *telemetryBuffer) sample() *telemetrySample {
	// The slots' slice headers are set before the buffer is published and
	// never written again.
	return &telemetrySample{slopes: make([]float32, len(b.slots[0].slopes)), cmd: make([]float32, len(b.slots[0].cmd))}
}

// newest returns a copy of the newest sample (nil before the first frame of a
// session).
func (t *telemetryRing) newest() *telemetrySample {
	b := t.buf.Load()
	if b == nil {
		return nil
	}
	for {
		w := b.written.Load()
		if w == 0 {
			return nil
		}
		x := b.sample()
		if b.read(w, x) == readOK {
			return x
		}
		// Overwritten while we looked, or skipped by the real-time goroutine:
		// the next one is newer still.
		if b.written.Load() == w {
			return nil
		}
	}
}

// snapshot returns a copy of the newest sample (an empty one before any).
func (t *telemetryRing) snapshot() *stillskyv1.StreamTelemetryResponse {
	x := t.newest()
	if x == nil {
		return &stillskyv1.StreamTelemetryResponse{}
	}
	return x.proto()
}

func (x *telemetrySample) proto() *stillskyv1.StreamTelemetryResponse {
	return &stillskyv1.StreamTelemetryResponse{
		FrameNumber:           x.frame,
		State:                 x.state.proto(),
		Slopes:                append([]float32(nil), x.slopes...),
		Commands:              append([]float32(nil), x.cmd...),
		ResidualSlopeRmsRad:   x.slopeRMS,
		ResidualWavefrontRmsM: x.wfRMS,
		StrehlEstimate:        x.strehl,
		SaturatedActuators:    uint32(x.saturated),
		RtcLatencyS:           float64(x.sent-x.received) * 1e-9,
	}
}

// streamLag is how many frames the telemetry stream may fall behind the loop
// before it skips to the newest: a client that keeps up gets every frame (every
// n-th with decimation), a slow one fewer, never any older than this.
const streamLag = 64

// stream sends one sample per block of n frame numbers, in order, until ctx ends.
func (t *telemetryRing) stream(ctx context.Context, n uint64, send func(*stillskyv1.StreamTelemetryResponse) error) error {
	tick := time.NewTicker(500 * time.Microsecond)
	defer tick.Stop()
	var b *telemetryBuffer
	var x *telemetrySample
	var next, last uint64
	for {
		if cur := t.buf.Load(); cur != b && cur != nil {
			b, x, next = cur, cur.sample(), 0
		}
		if b != nil {
			w := b.written.Load()
			if next == 0 || w >= next+streamLag {
				next = max(w, 1)
			}
			for ; next <= w; next++ {
				if b.read(next, x) != readOK {
					continue
				}
				if num := x.frame; num == 0 || num == last || num/n == last/n {
					continue
				}
				last = x.frame
				if err := send(x.proto()); err != nil {
					return err
				}
			}
		}
		select {
		case <-ctx.Done():
			return nil
		case <-tick.C:
		}
	}
}
