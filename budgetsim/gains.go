package budgetsim

import (
	"stillsky/analysis"
)

// OptimiseGains runs the closed loop at gain for the given frames, projects each
// frame's pseudo-open-loop slopes on the reconstructor's modes, and returns the
// modal gains relative to gain that analysis.OptimiseGains finds in their spectra
// (segments of 256 frames), as `stillsky ctl optimise-gains` applies them.
func (r *Rig) OptimiseGains(gain float64, seed int64, frames int) ([]float64, error) {
	proj, err := analysis.NewProjector(r.Reconstructor.Inverse, r.Interaction)
	if err != nil {
		return nil, err
	}
	var series [][]float64
	if _, err := r.Run(RunConfig{Gain: gain, Seed: seed, Warmup: 100, Frames: frames, Frame: func(s, c []float32) {
		a := make([]float64, proj.Modes())
		proj.Coefficients(s, c, a)
		series = append(series, a)
	}}); err != nil {
		return nil, err
	}
	sc := r.Scenario.Loop
	spectra, err := analysis.ModalSpectra(series, sc.FrameRate, 256)
	if err != nil {
		return nil, err
	}
	mg, err := analysis.OptimiseGains(spectra, analysis.Loop{Gain: gain, Delay: max(sc.DelayFrames, 1), FrameRate: sc.FrameRate}, nil)
	if err != nil {
		return nil, err
	}
	rel := make([]float64, len(mg.Gains))
	for i, g := range mg.Gains {
		rel[i] = g / gain
	}
	return rel, nil
}
