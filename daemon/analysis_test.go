package daemon_test

import (
	"context"
	"math"
	"testing"
	"time"

	"stillsky/analysis"
	"stillsky/daemon"
	stillskyv1 "stillsky/proto/stillsky/v1"
	"stillsky/sim/bench"
	"stillsky/sim/scenario"
)

// TestLiveAnalysis: the daemon estimates the turbulence from its own
// pseudo-open-loop slopes and exports the estimate and the error budget; the
// estimate is checked against the bench's truth (the scenario's r0 at 500 nm,
// zenith; τ0 = 0.314 r0/v, Roddier 1981), and modal gains optimised from the
// spectra install.
func TestLiveAnalysis(t *testing.T) {
	if testing.Short() {
		t.Skip("closed loop on the simulated bench: skipped in -short mode")
	}
	r := startRig(t, scenario.Default, bench.Options{Lockstep: true}, daemon.Config{AnalysisPeriod: 500 * time.Millisecond})
	r.calibrate(t)
	ctx := context.Background()
	if _, err := r.client.CloseLoop(ctx, &stillskyv1.CloseLoopRequest{}); err != nil {
		t.Fatal(err)
	}
	deadline := time.Now().Add(120 * time.Second)
	for r.d.LatestAnalysis() == nil {
		if time.Now().After(deadline) {
			t.Fatal("no analysis within 120 s of closing the loop")
		}
		time.Sleep(100 * time.Millisecond)
	}
	a := r.d.LatestAnalysis()
	t.Logf("live analysis: %v; slope noise %.3g rad", a, a.SlopeNoise)
	scn, _ := scenario.Load(scenario.Default)
	var v53 float64
	for _, l := range scn.Atmosphere.Layers {
		v53 += l.Fraction * math.Pow(l.WindSpeed, 5.0/3)
	}
	tau0 := 0.314 * scn.Atmosphere.R0 / math.Pow(v53, 0.6)
	// 2048 frames are a shorter sample than the bench test's: 15 % on r0, 25 % on τ0.
	if math.Abs(a.Turbulence.R0/scn.Atmosphere.R0-1) > 0.15 {
		t.Errorf("estimated r0 %.4f m, truth %.3f m", a.Turbulence.R0, scn.Atmosphere.R0)
	}
	if math.Abs(a.Turbulence.Tau0/tau0-1) > 0.25 {
		t.Errorf("estimated τ0 %.2f ms, truth %.2f ms", a.Turbulence.Tau0*1e3, tau0*1e3)
	}
	if b := a.Budget; !(b.Total > 0 && b.Strehl > 0.5 && b.Strehl < 1) {
		t.Errorf("live budget %+v: want a positive total and a Strehl ratio in (0.5, 1)", b)
	}
	// The live fitting term is that of the scenario's own mirror (its
	// Gaussian influence functions' coupling, which the mirror's Describe
	// reports), not of an ideal corrector of its band: recomputed here from
	// the same estimate with analysis.FittingVariance.
	o := analysis.Optics{Diameter: scn.Telescope.Diameter, Subaperture: scn.SubapertureSize(),
		Pitch: scn.SubapertureSize(), ScienceWavelength: scn.Science.Wavelength, Coupling: scn.DM.Coupling}
	tu := analysis.Turbulence{R0: a.Turbulence.R0, L0: a.Turbulence.L0, ZenithDeg: scn.Atmosphere.ZenithDeg}
	if want := analysis.FittingVariance(o, tu); math.Abs(a.Budget.Fitting/want-1) > 1e-6 {
		o.Coupling = 0
		t.Errorf("live fitting %.5g rad², want %.5g with the mirror's coupling %.3g (ideal corrector: %.5g)",
			a.Budget.Fitting, want, scn.DM.Coupling, analysis.FittingVariance(o, tu))
	}
	gauges := scrape(t, r.d.MetricsAddr())
	for _, name := range []string{"stillsky_estimated_r0_meters", "stillsky_estimated_tau0_seconds", "stillsky_budget_strehl_ratio"} {
		if v, ok := gauges[name]; !ok || !(v > 0) {
			t.Errorf("%s = %v (present %v), want > 0", name, v, ok)
		}
	}

	resp, err := r.client.OptimiseModalGains(ctx, &stillskyv1.OptimiseModalGainsRequest{Frames: 2048})
	if err != nil {
		t.Fatal(err)
	}
	t.Logf("optimised %d modal gains: predicted %.4g → %.4g rad²", len(resp.GetGains()), resp.GetPredictedResidualBefore(), resp.GetPredictedResidualAfter())
	if n := int(resp.GetStatus().GetReconstructor().GetModesKept()); len(resp.GetGains()) != n || !(resp.GetPredictedResidualAfter() <= resp.GetPredictedResidualBefore()) {
		t.Errorf("%d gains for %d modes; predicted %.4g → %.4g", len(resp.GetGains()), n, resp.GetPredictedResidualBefore(), resp.GetPredictedResidualAfter())
	}
	if _, err := r.client.OptimiseModalGains(ctx, &stillskyv1.OptimiseModalGainsRequest{Frames: 10}); err == nil {
		t.Error("10 frames accepted")
	}
}
