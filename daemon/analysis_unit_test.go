package daemon

import (
	"math"
	"math/rand/v2"
	"testing"

	"stillsky/analysis"
)

// TestCaptureGivesPseudoOpenLoop drives the unit frame by frame in closed loop
// and takes a capture from the telemetry ring: the captured frames, less the interaction matrix times
// the command the capture says the mirror held, give back the turbulence's own
// slopes (the pseudo-open-loop slopes) exactly; and for a free-running camera the
// held command is found from the mirror's acknowledgements.
func TestCaptureGivesPseudoOpenLoop(t *testing.T) {
	b := newBenchSim(t, 40, 12, Interlocks{})
	if err := b.u.install(b.params(0.3)); err != nil {
		t.Fatal(err)
	}
	b.u.request(stateClosed)
	rng := rand.New(rand.NewPCG(7, 8))
	for range 3 {
		b.step()
	}
	const n = 30
	c := newCapture(n, 40, 12)
	ring := b.u.telemetry.buf.Load()
	if c.take(ring) {
		t.Fatal("capture full before any frame")
	}
	var sky [][]float32
	for range n {
		for i := range b.sky {
			b.sky[i] = float32(1e-6 * rng.NormFloat64())
		}
		sky = append(sky, append([]float32(nil), b.sky...))
		b.step()
	}
	if !c.take(ring) {
		t.Fatalf("capture of %d frames not done: %d taken", n, c.count)
	}
	pol := make([]float64, 40)
	for i := 1; i < n; i++ {
		if c.lag[i] != 1 {
			t.Fatalf("frame %d: lag %d, want the lockstep delay 1", i, c.lag[i])
		}
		analysis.PseudoOpenLoop(b.im, c.slopes[i], c.cmds[i-c.lag[i]], pol)
		for j, v := range pol {
			if math.Abs(v-float64(sky[i][j])) > 1e-10+1e-4*math.Abs(float64(sky[i][j])) { // float32 slopes
				t.Fatalf("frame %d slope %d: pseudo-open-loop %g, turbulence %g", i, j, v, sky[i][j])
			}
		}
	}

	// Free-running: each command reaches the mirror 30 µs after its frame's
	// readout, so frame k's exposure (from a period before its readout) holds
	// the command of frame k − 2.
	b.rt.g.lockstep = false
	c = newCapture(10, 40, 12)
	c.take(ring)
	for range 10 {
		b.step()
		b.rt.acked[b.num%readoutRing].Store(b.now + 3e4)
	}
	if !c.take(ring) {
		t.Fatalf("free-running capture of 10 frames not done: %d taken", c.count)
	}
	// Frames 0 and 1 look back to lockstep frames the mirror never
	// acknowledged, so they keep the lag of the frame before.
	for i := 2; i < 10; i++ {
		if c.lag[i] != 2 {
			t.Errorf("free-running frame %d: lag %d, want 2", i, c.lag[i])
		}
	}

	// Acknowledged in batches (mirror protocol version 2): when a frame looks
	// back, the commands before it are not acknowledged yet. One batch, for
	// the frame before these, told an end-to-end latency of 1.3 ms, so frame
	// k's exposure (from 1 ms before its readout) holds the command of frame
	// k − 3: the newest to reach the mirror by then, at readout + 1.3 ms.
	before := b.num
	b.rt.acknowledged(before, b.now+1.3e6)
	c = newCapture(10, 40, 12)
	c.take(ring)
	for range 10 {
		b.step()
	}
	if !c.take(ring) {
		t.Fatalf("batched capture of 10 frames not done: %d taken", c.count)
	}
	// Frame 0 still finds, two back, a command acknowledged on its own
	// (above), 30 µs after its readout.
	if c.lag[0] != 2 {
		t.Errorf("batched frame 0: lag %d, want 2", c.lag[0])
	}
	for i := 1; i < 10; i++ {
		if c.lag[i] != 3 {
			t.Errorf("batched frame %d: lag %d, want 3 (1 + ⌈1.3 ms / 1 ms⌉)", i, c.lag[i])
		}
	}
}

// TestCaptureRestarts: a block the ring cannot give whole restarts — a frame
// taken in hold (mirror neither driven by the loop nor held flat) is left
// out, and one the ring lost to being read a whole ring late gives a
// block of the newest frames only.
func TestCaptureRestarts(t *testing.T) {
	b := newBenchSim(t, 40, 12, Interlocks{})
	if err := b.u.install(b.params(0.3)); err != nil {
		t.Fatal(err)
	}
	ring := b.u.telemetry.buf.Load()
	c := newCapture(5, 40, 12)
	c.take(ring)
	b.u.request(stateHold)
	for range 3 { // held: not taken
		b.step()
	}
	if st := b.u.current(); st != stateHold {
		t.Fatalf("unit in state %s, want hold", stateNames[st])
	}
	if c.take(ring) || c.count != 0 {
		t.Fatalf("frames in hold taken: %d", c.count)
	}
	b.u.request(stateClosed)
	for range 4 {
		b.step()
	}
	if c.take(ring) || c.count != 4 {
		t.Fatalf("after 4 closed-loop frames: %d taken, want 4", c.count)
	}
	// More than a ring of frames before the next read: the frame after the 4
	// taken is lost, so the block starts again at the newest frame.
	for range len(ring.slots) + 10 {
		b.step()
	}
	if c.take(ring) || c.count != 1 || c.next != b.num+1 {
		t.Fatalf("after a ring of frames: %d taken up to frame %d, want 1 (the newest, %d)", c.count, c.next-1, b.num)
	}
	for range 4 {
		b.step()
	}
	if !c.take(ring) || c.next != b.num+1 {
		t.Fatalf("block of the newest 5 frames not full: %d taken up to frame %d (newest %d)", c.count, c.next-1, b.num)
	}
}
