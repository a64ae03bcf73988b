package daemon_test

import (
	"context"
	"math"
	"testing"

	"stillsky/daemon"
	stillskyv1 "stillsky/proto/stillsky/v1"
	"stillsky/rig"
	"stillsky/sim/bench"
	"stillsky/sim/scenario"
)

// lgsRun closes both loops of scenario s (the high-order loop on the main
// sensor, the tip-tilt loop on the natural-star quad cell, the deformable
// mirror's tip-tilt offloaded) through the daemon over real gRPC in lockstep
// and returns the true long-exposure science Strehl of frames frames after a
// warm-up, with the metrics at the end.
func lgsRun(t *testing.T, s *scenario.Scenario, frames uint64) (strehl float64, m map[string]float64) {
	t.Helper()
	rg, err := rig.Start(context.Background(), rig.Config{Scenario: s, Bench: bench.Options{Lockstep: true}, Loop: daemon.Config{AnalysisPeriod: -1}})
	if err != nil {
		t.Fatal(err)
	}
	defer func() {
		if err := rg.Close(); err != nil {
			t.Errorf("shutdown: %v", err)
		}
	}()
	r := &loopRig{bench: rg.Bench, d: rg.Loop, client: rg.Client, conn: rg.Conn, rig: rg}
	r.waitFrames(t, 1)
	r.calibrate(t)
	if _, err := r.client.CloseLoop(context.Background(), &stillskyv1.CloseLoopRequest{}); err != nil {
		t.Fatal(err)
	}
	r.waitFrames(t, 200)
	r.bench.ResetStats()
	st := r.waitFrames(t, frames)
	if st.GetState() != stillskyv1.LoopState_LOOP_STATE_CLOSED {
		t.Fatalf("%s: state %v (last trip %q), want closed", s.Name, st.GetState(), st.GetLastInterlock())
	}
	return r.bench.Stats().Strehl, scrape(t, r.d.MetricsAddr())
}

// TestLGSBothLoopsOverGRPC runs the lgs scenario's two loops through the
// daemon and checks the science Strehl against the cone effect: the same
// system sensing on a natural star at infinity (both loops, the same
// tip-tilt star) sets the upper value, and the beacon's cone costs at most
// σ²_cone = (D/d0)^(5/3) on top, so S_lgs lies in [S_ngs·exp(−σ²_cone),
// S_ngs] (Fried & Belsher 1994, J. Opt. Soc. Am. A 11, 277; d0 from the layer
// profile as in Tyler 1994, J. Opt. Soc. Am. A 11, 409, *from memory*:
// (D/d0)^(5/3) = 1.184 Σ f_i (h_i/H)^(5/3) (D/r0)^(5/3) at 500 nm, scaled by
// (500 nm/λ)² to the science wavelength), over two seeds. The tip-tilt
// loop's metrics must show it working: frames and commands at half the
// laser sensor's rate, no saturation, a residual tilt below the open loop's.
func TestLGSBothLoopsOverGRPC(t *testing.T) {
	if testing.Short() {
		t.Skip("four closed-loop runs of the lgs bench through the daemon: skipped in -short mode")
	}
	lgs, err := scenario.Load("lgs")
	if err != nil {
		t.Fatal(err)
	}
	a := lgs.Atmosphere
	sum := 0.0
	for _, l := range a.Layers {
		sum += l.Fraction * math.Pow(l.Altitude/lgs.LaserGuideStar.Height, 5.0/3)
	}
	cone := 1.184 * sum * math.Pow(lgs.Telescope.Diameter/a.R0, 5.0/3) * math.Pow(500e-9/lgs.Science.Wavelength, 2)
	const frames = 600
	for _, seed := range []int64{5, 6} {
		l := *lgs
		l.Atmosphere.Seed = seed
		n := l
		n.LaserGuideStar = nil
		sNGS, _ := lgsRun(t, &n, frames)
		sLGS, m := lgsRun(t, &l, frames)
		t.Logf("seed %d: K-band Strehl natural star %.3f, beacon %.3f, bound %.3f (σ²_cone %.3f rad²); tip-tilt frames %g, commands %g, residual %.3g rad rms, saturated frames %g",
			seed, sNGS, sLGS, sNGS*math.Exp(-cone), cone, m["stillsky_tip_tilt_frames_total"], m["stillsky_tip_tilt_commands_total"],
			m["stillsky_tip_tilt_residual_rms_radians"], m["stillsky_tip_tilt_saturated_frames_total"])
		if !(sLGS <= sNGS && sLGS >= sNGS*math.Exp(-cone)) {
			t.Errorf("seed %d: beacon Strehl %.3f outside [%.3f, %.3f] = [S_ngs·exp(−σ²_cone), S_ngs]", seed, sLGS, sNGS*math.Exp(-cone), sNGS)
		}
		if m["stillsky_tip_tilt_frames_total"] < 0.4*frames || m["stillsky_tip_tilt_commands_total"] < 0.4*frames {
			t.Errorf("seed %d: %g tip-tilt frames and %g commands, want about half the %d laser frames or more", seed,
				m["stillsky_tip_tilt_frames_total"], m["stillsky_tip_tilt_commands_total"], frames)
		}
		if m["stillsky_tip_tilt_saturated_frames_total"] != 0 {
			t.Errorf("seed %d: %g saturated tip-tilt frames", seed, m["stillsky_tip_tilt_saturated_frames_total"])
		}
	}
}
