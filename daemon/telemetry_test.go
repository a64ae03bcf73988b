package daemon

import (
	"testing"

	"stillsky/controller"
)

// The ring hands readers every frame in order while they keep within its length,
// says when one was overwritten, never makes the writer wait for a reader, and
// records without allocating.
func TestTelemetryRing(t *testing.T) {
	var r telemetryRing
	r.init(6, 4, 100)
	b := r.buf.Load()
	n := uint64(len(b.slots))
	if n != ringMinFrames {
		t.Fatalf("ring of %d frames at 100 Hz, want %d", n, ringMinFrames)
	}
	slopes, cmd := make([]float32, 6), make([]float32, 4)
	put := func(num uint64) {
		slopes[0], cmd[3] = float32(num), -float32(num)
		r.record(num, stateClosed, slopes, cmd, controller.Result{Saturated: int(num % 7)}, 1, frameTimes{readout: int64(num), sent: int64(num) + 5})
	}
	for num := uint64(1); num <= n+10; num++ {
		put(100 + num)
	}
	x := b.sample()
	for seq, want := range map[uint64]readResult{1: readOverrun, 10: readOverrun, 11: readOK, n + 10: readOK, n + 11: readNotYet} {
		if got := b.read(seq, x); got != want {
			t.Errorf("read(%d) = %v, want %v", seq, got, want)
		}
	}
	b.read(11, x)
	if x.frame != 111 || x.slopes[0] != 111 || x.cmd[3] != -111 || x.saturated != 111%7 || x.sent-x.readout != 5 {
		t.Errorf("frame 11 read back as %+v", x)
	}
	if s := r.snapshot(); s.GetFrameNumber() != 100+n+10 || s.GetCommands()[3] != -float32(100+n+10) {
		t.Errorf("newest frame %d", s.GetFrameNumber())
	}
	// A reader holding the slot the writer needs: the writer skips the frame,
	// and a reader asking for it is told it was lost.
	next := b.written.Load() + 1
	slot := &b.slots[(next-1)%n]
	slot.mu.Lock()
	put(9999)
	slot.mu.Unlock()
	if got := b.read(next, x); got != readOverrun {
		t.Errorf("a frame skipped while its slot was held: read = %v, want overrun", got)
	}
	if allocs := testing.AllocsPerRun(100, func() { put(5) }); allocs != 0 {
		t.Errorf("record allocates %.1f objects per frame", allocs)
	}
}
