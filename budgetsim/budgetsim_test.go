package budgetsim

import (
	"math"
	"testing"

	"stillsky/sim/scenario"
)

// TestTermsAgainstSimulation measures each term of the error budget on the bench
// (noise off, the loop with no delay, the best mirror fit) and compares it with
// the analytic model of package analysis (the Fourier model of Rigaut, Véran &
// Lai 1998 with the bench's own pupil sampling and the finite pupil's piston
// filter on the aliasing, Sasiela 1994), averaged over three seeds, on the small,
// default and large scenarios. Tolerances: ±30 % per term, ±0.03 on the Maréchal
// Strehl ratio of the total (Mahajan 1983).
func TestTermsAgainstSimulation(t *testing.T) {
	if testing.Short() {
		t.Skip("closed loop on the simulated bench: skipped in -short mode")
	}
	// The large scenario (40×40) costs ten times the default's per frame; its
	// Strehl ratio varies by ±0.002 from seed to seed, so fewer frames do.
	for _, c := range []struct {
		name   string
		frames int
	}{{"small", 1000}, {scenario.Default, 1000}, {"large", 400}} {
		t.Run(c.name, func(t *testing.T) { termsAgainstSimulation(t, c.name, c.frames) })
	}
}

func termsAgainstSimulation(t *testing.T, name string, frames int) {
	scn, err := scenario.Load(name)
	if err != nil {
		t.Fatal(err)
	}
	rig, err := Calibrate(scn)
	if err != nil {
		t.Fatal(err)
	}
	// The terms are isolated with a pure integrator (leak 0): a leak's cost shows
	// in the delayed loop alone, beside the servo lag.
	b, err := rig.Predict(DefaultGain, 0, nil, true)
	if err != nil {
		t.Fatal(err)
	}
	// The target is on the mean of three seeds: one 1000-frame run's Strehl
	// ratio varies by about ±0.01 from seed to seed on the small and default
	// scenarios.
	seeds := []int64{1, 2, 3}
	m, sd, _, err := rig.Measure(DefaultGain, 0, seeds, frames)
	if err != nil {
		t.Fatal(err)
	}
	t.Logf("spread over seeds %v: total %.4f rad², Strehl %.3f", seeds, sd.Total, sd.Strehl)
	for _, c := range []struct {
		name               string
		measured, analytic float64
	}{
		// The no-delay loop at gain 1 passes every aliased frequency whole, and its
		// residual beyond the best fit holds both the aliasing and the low-order
		// under-correction; the delayed loop filters the aliasing through its noise
		// transfer function, so what it adds to the no-delay loop is the servo lag
		// plus that change.
		{"fitting", m.Fitting, b.Fitting}, {"aliasing + low order", m.Aliasing, b.AliasingNoDelay + b.LowOrder},
		{"servo", m.Servo, b.Servo + b.Aliasing - b.AliasingNoDelay}, {"noise", m.Noise, b.Noise}, {"total", m.Total, b.Total},
	} {
		t.Run(c.name, func(t *testing.T) {
			t.Logf("%-20s measured %.4f rad², analytic %.4f rad² (%+.0f %%)", c.name, c.measured, c.analytic, 100*(c.measured/c.analytic-1))
			if math.Abs(c.measured/c.analytic-1) > 0.3 {
				t.Errorf("%s: measured %.4f rad², analytic %.4f rad²: want within 30 %%", c.name, c.measured, c.analytic)
			}
		})
	}
	t.Logf("low order alone: regressed %.4f rad², analytic %.4f rad² (diagonal model; band edge above it %.4f rad²)", m.LowOrder, b.LowOrder-b.BandEdge, b.BandEdge)
	t.Logf("Strehl: long exposure %.3f, Maréchal of the measured total %.3f, predicted %.3f", m.Strehl, math.Exp(-m.Total), b.Strehl)
	if math.Abs(m.Strehl-b.Strehl) > 0.03 {
		t.Errorf("long-exposure Strehl %.3f, predicted %.3f: want within 0.03", m.Strehl, b.Strehl)
	}
	// With the daemon's default leak, on the same seeds: one seed's Strehl ratio
	// at leak 0.01 varies by about ±0.02 on the default scenario.
	bl, err := rig.Predict(DefaultGain, DefaultLeak, nil, true)
	if err != nil {
		t.Fatal(err)
	}
	var ml Measured
	for _, seed := range seeds {
		r, err := rig.Run(RunConfig{Gain: DefaultGain, Leak: DefaultLeak, Seed: seed, Warmup: 200, Frames: frames, StrehlEvery: 10})
		if err != nil {
			t.Fatal(err)
		}
		ml.Residual += r.Residual / float64(len(seeds))
		ml.Strehl += r.Strehl / float64(len(seeds))
	}
	t.Logf("leak %g: total measured %.4f rad², predicted %.4f rad² (low order %.4f); Strehl %.3f, predicted %.3f", DefaultLeak, ml.Residual, bl.Total, bl.LowOrder, ml.Strehl, bl.Strehl)
	if math.Abs(ml.Strehl-bl.Strehl) > 0.03 {
		t.Errorf("leak %g: long-exposure Strehl %.3f, predicted %.3f: want within 0.03", DefaultLeak, ml.Strehl, bl.Strehl)
	}
}
