package budgetsim

import (
	"math"
	"testing"

	"stillsky/analysis"
	"stillsky/sim/scenario"
)

// TestTurbulenceEstimate estimates r0 and τ0 from the pseudo-open-loop slopes of a
// closed loop on the bench and compares them with the bench's truth: r0 of the
// scenario, τ0 = 0.314 r0/v with v = (Σ fᵢ vᵢ^(5/3))^(3/5) (Roddier 1981).
func TestTurbulenceEstimate(t *testing.T) {
	if testing.Short() {
		t.Skip("closed loop on the simulated bench: skipped in -short mode")
	}
	scn, err := scenario.Load(scenario.Default)
	if err != nil {
		t.Fatal(err)
	}
	rig, err := Calibrate(scn)
	if err != nil {
		t.Fatal(err)
	}
	est, err := analysis.NewEstimator(rig.SensorGeometry(), analysis.EstimatorConfig{})
	if err != nil {
		t.Fatal(err)
	}
	proj, err := analysis.NewProjector(est.Projection(), rig.Interaction)
	if err != nil {
		t.Fatal(err)
	}
	for _, r0 := range []float64{0.08, 0.12, 0.20} {
		var series [][]float64
		_, err := rig.Run(RunConfig{Gain: DefaultGain, R0: r0, Warmup: 100, Frames: 4000, Frame: func(s, c []float32) {
			a := make([]float64, proj.Modes())
			proj.Coefficients(s, c, a)
			series = append(series, a)
		}})
		if err != nil {
			t.Fatal(err)
		}
		e, err := est.Estimate(series, scn.Loop.FrameRate, scn.Atmosphere.ZenithDeg)
		if err != nil {
			t.Fatal(err)
		}
		truth := Turbulence(scn)
		truth.R0 = r0
		t.Logf("r0 %.3f m: estimated %.4f m (L0 %.0f m), wind %.2f m/s (truth %.2f), τ0 %.2f ms (truth %.2f), noise %.2g rad²",
			r0, e.R0, e.L0, e.Wind, truth.EffectiveWind(), e.Tau0*1e3, truth.Tau0()*1e3, e.Noise)
		if math.Abs(e.R0/r0-1) > 0.1 {
			t.Errorf("r0 %.3f m: estimated %.4f m, want within 10 %%", r0, e.R0)
		}
		if math.Abs(e.Tau0/truth.Tau0()-1) > 0.2 {
			t.Errorf("r0 %.3f m: τ0 estimated %.2f ms, truth %.2f ms, want within 20 %%", r0, e.Tau0*1e3, truth.Tau0()*1e3)
		}
	}
}
