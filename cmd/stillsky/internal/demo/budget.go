package demo

import (
	"fmt"
	"io"

	"stillsky/analysis"
	"stillsky/budgetsim"
	"stillsky/rig"
	"stillsky/sim/bench"
	"stillsky/sim/scenario"
)

// BudgetSummary is the error budget of a demo run: predicted from the scenario
// (the truth of the bench) with the loop's own reconstructor, gain and leak, and the
// loop's live budget from its own turbulence estimate, beside the measured
// long-exposure Strehl ratio.
type BudgetSummary struct {
	// Predicted is the budget of the scenario as the bench simulates it
	// (analysis.Optics.MaxFrequency and GradientSpan of its pupil sampling).
	Predicted analysis.Budget `json:"predicted"`
	// Live is the loop's own latest analysis (zero before the first one).
	Live           analysis.Budget             `json:"live"`
	LiveTurbulence analysis.TurbulenceEstimate `json:"live_turbulence"`
	// TruthR0M and TruthTau0S are the scenario's r0 (500 nm, zenith) and τ0.
	TruthR0M   float64 `json:"truth_r0_m"`
	TruthTau0S float64 `json:"truth_tau0_s"`
	// TipTiltApart says tip and tilt are corrected by the tip-tilt loop and
	// left out of the budget.
	TipTiltApart bool `json:"tip_tilt_apart,omitempty"`
}

// predictBudget computes the budget of the run; nil when it cannot (no
// reconstructor, or an unstable gain).
func predictBudget(scn *scenario.Scenario, r *rig.Rig, gain, leak float64) *BudgetSummary {
	rec := r.Loop.Reconstructor()
	if rec == nil || !(gain > 0) || scn.Eye != nil { // the budget models a layered atmosphere
		return nil
	}
	sys, err := bench.NewSystem(scn)
	if err != nil {
		return nil
	}
	in, err := budgetsim.Input(scn, sys, rec, gain, nil, true)
	if err != nil {
		return nil
	}
	in.Loop.Leak = leak
	if scn.TipTilt != nil && len(in.LowOrder) >= 2 {
		// The high-order reconstructor ignores the sensor's tip-tilt (Noll 2
		// and 3): the tip-tilt loop corrects them, and its residual is not in
		// this budget.
		in.LowOrder[0], in.LowOrder[1] = 1, 1
	}
	b, err := analysis.Compute(in)
	if err != nil {
		return nil
	}
	t := budgetsim.Turbulence(scn)
	s := &BudgetSummary{Predicted: b, TruthR0M: t.R0, TruthTau0S: t.Tau0(), TipTiltApart: scn.TipTilt != nil}
	if a := r.Loop.LatestAnalysis(); a != nil {
		s.Live, s.LiveTurbulence = a.Budget, a.Turbulence
	}
	return s
}

// write prints the budget beside the measured Strehl ratio.
func (s *BudgetSummary) write(out io.Writer, measured float64) {
	if s == nil {
		return
	}
	b := s.Predicted
	fmt.Fprintf(out, "  error budget (rad² at the science wavelength): fitting %.4f + aliasing %.4f + low order %.4f + servo %.4f + noise %.4f = %.4f (%.0f nm)\n",
		b.Fitting, b.Aliasing, b.LowOrder, b.Servo, b.Noise, b.Total, b.NM(b.Total))
	fmt.Fprintf(out, "  Strehl predicted (Maréchal) %.3f, measured (long exposure) %.3f\n", b.Strehl, measured)
	if s.TipTiltApart {
		fmt.Fprintf(out, "  (tip and tilt are the tip-tilt loop's: the budget counts them corrected and leaves out its residual)\n")
	}
	if t := s.LiveTurbulence; t.Frames > 0 {
		fmt.Fprintf(out, "  loop's own estimate: r0 %.3f m (scenario %.3f m), τ0 %.2f ms (scenario %.2f ms), L0 %.0f m; its budget %.4f rad², Strehl %.3f\n",
			t.R0, s.TruthR0M, t.Tau0*1e3, s.TruthTau0S*1e3, t.L0, s.Live.Total, s.Live.Strehl)
	}
}
