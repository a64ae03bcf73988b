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
		a.add(1e-7)
		a.expose(psfs[2])
	}
	if len(a.blocks) != 1 || math.Abs(a.blocks[0]-0.5) > 1e-15 {
		t.Errorf("after a reset, blocks %v, want [0.5]", a.blocks)
	}
}
