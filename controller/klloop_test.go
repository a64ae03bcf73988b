package controller_test

import (
	"math"
	"testing"

	"gonum.org/v1/gonum/mat"

	"stillsky/budgetsim"
	"stillsky/controller"
	"stillsky/sim/bench"
	"stillsky/sim/scenario"
)

// TestKLControlClosedLoop closes the loop on the default scenario in lockstep
// (delay line, same turbulence seed) twice: with the zonal reconstructor (the
// singular modes of M, kept to condition 30) and with the one built in the
// mirror's Karhunen–Loève modes (as many as the zonal one controls,
// controller.KLBasis), unit gains, and checks that KL control is no worse than zonal control: Maréchal
// Strehl at the science wavelength within 0.02 (a tolerance of our own: the
// two control nearly the same space of modes). A third run controls in the
// mirror's own modes (controller.MirrorMetric, the daemon's defaults for basis
// "mirror"), which must land within 0.01 of zonal control (the target of
// issue 13; with every seen mode kept the two reconstructors are equal,
// TestMirrorModesAgainstGonum). It also checks that a modal step allocates nothing.
func TestKLControlClosedLoop(t *testing.T) {
	if testing.Short() {
		t.Skip("closed loop on the simulated bench: skipped in -short mode")
	}
	scn, err := scenario.Load(scenario.Default)
	if err != nil {
		t.Fatal(err)
	}
	// Calibrated as the daemon does by default (budgetsim.Calibrate); both
	// reconstructors are built from the same interaction matrix.
	calibrated, err := budgetsim.Calibrate(scn)
	if err != nil {
		t.Fatal(err)
	}
	m := calibrated.Interaction
	d := scn.Loop.DelayFrames
	ns, na := m.Dims()
	slopes, cmd := make([]float32, ns), make([]float32, na)
	sys, err := bench.NewSystem(scn)
	if err != nil {
		t.Fatal(err)
	}
	mir := sys.Mirror()
	kl, _, err := controller.KLBasis(controller.KLConfig{
		Positions: mir.Positions(), Pitch: mir.Pitch(), Coupling: mir.Coupling(), Diameter: scn.Telescope.Diameter,
	})
	if err != nil {
		t.Fatal(err)
	}

	lambda := scn.Science.Wavelength
	const gain = 0.5
	run := func(c controller.ReconstructorConfig) (float64, int) {
		r, err := controller.BuildReconstructor(m, c)
		if err != nil {
			t.Fatal(err)
		}
		p, err := controller.NewParams(controller.ParamsConfig{Reconstructor: r, Gain: gain, Stroke: scn.DM.Stroke, StrehlWavelength: lambda})
		if err != nil {
			t.Fatal(err)
		}
		defer p.Close()
		loop, err := controller.NewLoop(p)
		if err != nil {
			t.Fatal(err)
		}
		closed, err := bench.NewSystem(scn)
		if err != nil {
			t.Fatal(err)
		}
		const warmup, frames = 200, 600
		v := 0.0
		line := budgetsim.NewDelayLine(closed, d)
		for k := 0; k < warmup+frames; k++ {
			line.Frame(slopes, func() []float32 {
				loop.Step(slopes, cmd)
				return cmd
			})
			if k >= warmup {
				v += math.Pow(2*math.Pi*closed.ResidualRMS()/lambda, 2) / frames
			}
		}
		if a := testing.AllocsPerRun(50, func() { loop.Step(slopes, cmd) }); a != 0 {
			t.Errorf("basis %q: %v allocations per step, want 0", c.BasisName, a)
		}
		return v, r.NumModes()
	}
	zonal, nz := run(controller.ReconstructorConfig{MaxCondition: 30, UnseenCondition: 100})
	// As many KL modes as zonal ones, M·B cut at condition 100 (the daemon's
	// default for basis "kl": tilt, seen weakest per unit rms, must stay).
	klVar, nk := run(controller.ReconstructorConfig{MaxCondition: 100, UnseenCondition: 100, Basis: mat.DenseCopyOf(kl.Slice(0, na, 0, nz)), BasisName: "kl"})
	// Mirror modes at the defaults the daemon uses for basis "mirror".
	metric, err := controller.MirrorMetric(mir.Positions(), mir.Pitch(), mir.Coupling())
	if err != nil {
		t.Fatal(err)
	}
	mirVar, nmm := run(controller.ReconstructorConfig{Metric: metric, BasisName: controller.MirrorBasisName})
	sz, sk, sm := math.Exp(-zonal), math.Exp(-klVar), math.Exp(-mirVar)
	t.Logf("zonal: %d modes, %.4f rad², Strehl %.3f; KL: %d modes, %.4f rad², Strehl %.3f; mirror: %d modes, %.4f rad², Strehl %.3f",
		nz, zonal, sz, nk, klVar, sk, nmm, mirVar, sm)
	if sk < sz-0.02 {
		t.Errorf("KL control Strehl %.3f below zonal %.3f − 0.02", sk, sz)
	}
	if math.Abs(sm-sz) > 0.01 {
		t.Errorf("mirror-mode control Strehl %.3f differs from zonal %.3f by more than 0.01", sm, sz)
	}
}
