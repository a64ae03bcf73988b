package daemon

import (
	"math"
	"math/rand/v2"
	"testing"

	"stillsky/analysis"
)

// TestCaptureGivesPseudoOpenLoop drives the unit frame by frame in closed loop
// with a capture armed: the captured frames, less the interaction matrix times
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
	b.u.capture.Store(c)
	c.armed.Store(true)
	var sky [][]float32
	for range n {
		for i := range b.sky {
			b.sky[i] = float32(1e-6 * rng.NormFloat64())
		}
		sky = append(sky, append([]float32(nil), b.sky...))
		b.step()
	}
	select {
	case <-c.done:
	default:
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
	b.u.capture.Store(c)
	c.armed.Store(true)
	for range 10 {
		b.step()
		b.rt.acked[b.num%readoutRing].Store(b.now + 3e4)
	}
	for i := 1; i < 10; i++ {
		if c.lag[i] != 2 {
			t.Errorf("free-running frame %d: lag %d, want 2", i, c.lag[i])
		}
	}
}
