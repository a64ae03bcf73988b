package budgetsim

import (
	"testing"

	"stillsky/sim/scenario"
)

// TestOptimisedGainsBeatBestScan: on the small scenario with a guide star 3.5
// magnitudes fainter, modal gains optimised from pseudo-open-loop spectra
// (Gendron & Léna 1994) give a higher long-exposure Strehl ratio, averaged over
// three turbulence seeds, than the best single gain of a scan.
func TestOptimisedGainsBeatBestScan(t *testing.T) {
	if testing.Short() {
		t.Skip("closed loop on the simulated bench: skipped in -short mode")
	}
	scn, err := scenario.Load("small")
	if err != nil {
		t.Fatal(err)
	}
	faint := *scn
	faint.GuideStar.Magnitude += 3.5
	rig, err := Calibrate(&faint)
	if err != nil {
		t.Fatal(err)
	}
	seeds := []int64{11, 12, 13}
	const frames = 3000
	mean := func(gain float64, modal []float64) float64 {
		s := 0.0
		for _, seed := range seeds {
			m, err := rig.Run(RunConfig{Gain: gain, ModalGains: modal, Seed: seed, Warmup: 200, Frames: frames, StrehlEvery: 5})
			if err != nil {
				t.Fatal(err)
			}
			s += m.Strehl / float64(len(seeds))
		}
		return s
	}
	bestGain, bestStrehl := 0.0, 0.0
	for _, g := range []float64{0.1, 0.2, 0.3, 0.4, 0.5, 0.6, 0.8, 1.0} {
		s := mean(g, nil)
		t.Logf("gain %.1f: Strehl %.4f", g, s)
		if s > bestStrehl {
			bestGain, bestStrehl = g, s
		}
	}
	rel, err := rig.OptimiseGains(DefaultGain, 99, 4000)
	if err != nil {
		t.Fatal(err)
	}
	opt := mean(DefaultGain, rel)
	t.Logf("best single gain %.1f: Strehl %.4f; optimised modal gains (%v …): Strehl %.4f", bestGain, bestStrehl, rel[:6], opt)
	if !(opt > bestStrehl) {
		t.Errorf("optimised modal gains: Strehl %.4f, not above the best single gain's %.4f", opt, bestStrehl)
	}
}
