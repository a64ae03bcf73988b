package budgetsim

import (
	"math"
	"testing"

	"stillsky/sim/scenario"
)

// TestTermsAgainstSimulation measures each term of the error budget on the bench
// (noise off, the loop with no delay, the best mirror fit) and compares it with
// the analytic model of package analysis (the Fourier model of Rigaut, Véran &
// Lai 1998 with the bench's own pupil sampling). Tolerances: ±30 % per term,
// ±0.03 on the Maréchal Strehl ratio of the total (Mahajan 1983).
func TestTermsAgainstSimulation(t *testing.T) {
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
	b, err := rig.Predict(DefaultGain, nil, true)
	if err != nil {
		t.Fatal(err)
	}
	m, err := rig.Decompose(DefaultGain, 0, 200, 1000, 10)
	if err != nil {
		t.Fatal(err)
	}
	for _, c := range []struct {
		name               string
		measured, analytic float64
	}{
		{"fitting", m.Fitting, b.Fitting}, {"aliasing", m.Aliasing, b.Aliasing},
		{"servo", m.Servo, b.Servo}, {"noise", m.Noise, b.Noise}, {"total", m.Total, b.Total},
	} {
		t.Run(c.name, func(t *testing.T) {
			t.Logf("%-8s measured %.4f rad², analytic %.4f rad² (%+.0f %%)", c.name, c.measured, c.analytic, 100*(c.measured/c.analytic-1))
			if math.Abs(c.measured/c.analytic-1) > 0.3 {
				t.Errorf("%s: measured %.4f rad², analytic %.4f rad²: want within 30 %%", c.name, c.measured, c.analytic)
			}
		})
	}
	t.Logf("Strehl: long exposure %.3f, Maréchal of the measured total %.3f, predicted %.3f", m.Strehl, math.Exp(-m.Total), b.Strehl)
	if math.Abs(m.Strehl-b.Strehl) > 0.03 {
		t.Errorf("long-exposure Strehl %.3f, predicted %.3f: want within 0.03", m.Strehl, b.Strehl)
	}
}
