package bench

import (
	"math"
	"testing"
)

// The one-second blocks of a window: each complete block of blockFrames frames
// gets the Strehl ratio of its own PSFs (the peak of their mean, by definition);
// an incomplete block is left out, and ResetStats starts the blocks afresh.
func TestBlockStrehl(t *testing.T) {
	a := statsAccumulator{exp: exposure{sum: make([]float64, 2)}, block: exposure{sum: make([]float64, 2)}, blockFrames: 4}
	// PSFs with their peak in either pixel: a block's exposure peaks where the
	// mean of its own PSFs does.
	psfs := [][]float64{{0.9, 0.1}, {0.7, 0.2}, {0.1, 0.5}, {0.2, 0.6}, {0.3, 0.3}}
	for k := 0; k < 10; k++ {
		a.tick()
		a.add(1e-7)
		if k%2 == 0 {
			a.expose(psfs[k/2])
		}
	}
	want := []float64{(0.9 + 0.7) / 2, (0.5 + 0.6) / 2} // frames 1–4: PSFs 0, 1; 5–8: 2, 3
	got := a.blocks
	if len(got) != len(want) {
		t.Fatalf("%d blocks %v, want %v (the third is incomplete)", len(got), got, want)
	}
	for i := range want {
		if math.Abs(got[i]-want[i]) > 1e-15 {
			t.Errorf("block %d: Strehl %g, want %g", i, got[i], want[i])
		}
	}
	if whole := a.exp.strehl(); math.Abs(whole-(0.9+0.7+0.1+0.2+0.3)/5) > 1e-15 {
		t.Errorf("window Strehl %g, want the peak of all five PSFs' mean", whole)
	}
	a.reset()
	for k := 0; k < 4; k++ {
		a.tick()
		a.add(1e-7)
		a.expose(psfs[2])
	}
	if len(a.blocks) != 1 || math.Abs(a.blocks[0]-0.5) > 1e-15 {
		t.Errorf("after a reset, blocks %v, want [0.5]", a.blocks)
	}
}

// Free-running, the residual is formed only on the frames the science camera
// samples, but every frame counts towards its one-second block: blocks close on
// the frame count, and the mean residual is over the frames that formed one.
func TestBlocksCountEveryFrame(t *testing.T) {
	a := statsAccumulator{exp: exposure{sum: make([]float64, 2)}, block: exposure{sum: make([]float64, 2)}, blockFrames: 10}
	for k := 1; k <= 25; k++ {
		a.tick()
		if k%5 == 0 { // a sample every 5th frame
			a.add(float64(k) * 1e-9)
			a.expose([]float64{0.6, 0.1})
		}
	}
	if len(a.blocks) != 2 {
		t.Fatalf("%d blocks after 25 frames of 10-frame blocks, want 2", len(a.blocks))
	}
	if a.frames != 25 || a.residualN != 5 {
		t.Errorf("frames %d, residuals %d: want 25 and 5", a.frames, a.residualN)
	}
	if mean := a.sumResidual / float64(a.residualN); math.Abs(mean-15e-9) > 1e-18 {
		t.Errorf("mean residual %g, want 15e-9 (5, 10, 15, 20, 25 nm)", mean)
	}
}
