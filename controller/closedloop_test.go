package controller_test

import (
	"math"
	"testing"
	"time"

	"gonum.org/v1/gonum/mat"

	"stillsky/analysis"
	"stillsky/budgetsim"
	"stillsky/controller"
	"stillsky/sim/bench"
	"stillsky/sim/scenario"
)

func TestClosedLoopOnBench(t *testing.T) {
	if testing.Short() {
		t.Skip("closed loop on the simulated bench: skipped in -short mode")
	}
	scn, err := scenario.Load(scenario.Default)
	if err != nil {
		t.Fatal(err)
	}
	d := scn.Loop.DelayFrames

	// Calibrate with the turbulence off, as on a calibration source; sensor noise
	// stays on and is averaged by the Hadamard patterns.
	sys, err := bench.NewSystem(scn)
	if err != nil {
		t.Fatal(err)
	}
	sys.SetTurbulence(false)
	ns, na := sys.NumSlopes(), sys.NumActuators()
	start := time.Now()
	cal, err := controller.NewCalibrator(controller.CalibrationConfig{
		Actuators: na, Slopes: ns, Amplitude: 1e-6, FramesPerPattern: 1, SettleFrames: d, Hadamard: true,
	})
	if err != nil {
		t.Fatal(err)
	}
	slopes, cmd := make([]float32, ns), make([]float32, na)
	line := budgetsim.NewDelayLine(sys, d)
	for !cal.Done() {
		line.Frame(slopes, func() []float32 {
			if err := cal.Feed(slopes); err != nil {
				t.Fatal(err)
			}
			cal.Command(cmd)
			return cmd
		})
	}
	m, err := cal.InteractionMatrix()
	if err != nil {
		t.Fatal(err)
	}
	t.Logf("calibration: %d slopes × %d actuators, %d frames in %v", ns, na, func() int { _, n := cal.Progress(); return n }(), time.Since(start))

	// Moore–Penrose conditions on the measured matrix (Penrose 1955; docs/control-law.md,
	// "Pseudo-inverse"); agreement with gonum's SVD is checked on random matrices in
	// package controller.
	full, err := controller.BuildReconstructor(m, controller.ReconstructorConfig{MaxCondition: 1e12, UnseenCondition: 1e12, KeepPiston: true})
	if err != nil {
		t.Fatal(err)
	}
	var pinv mat.Dense
	pinv.Scale(-1, full.Control)
	checkPenrose(t, m, &pinv, 1e-8)
	// Control the modes seen at least 1/30 as well as the best one; the spectrum
	// of this geometry has a gap there (about 490 modes above, waffle-like edge
	// modes and piston below at the noise level), and everything past condition
	// 100 is projected out of the commands.
	r, err := controller.BuildReconstructor(m, controller.ReconstructorConfig{MaxCondition: 30, UnseenCondition: 100})
	if err != nil {
		t.Fatal(err)
	}
	t.Logf("reconstructor: %d of %d modes kept, %d unseen dimensions projected out", r.ModesKept, len(r.SingularValues), r.Unseen)
	const gain = 0.5
	lambda := scn.Science.Wavelength
	p, err := controller.NewParams(controller.ParamsConfig{
		Reconstructor: r, Gain: gain, Stroke: scn.DM.Stroke, StrehlWavelength: lambda,
	})
	if err != nil {
		t.Fatal(err)
	}
	defer p.Close()
	loop, err := controller.NewLoop(p)
	if err != nil {
		t.Fatal(err)
	}

	// The same turbulence (same seed) open and closed loop.
	open, err := bench.NewSystem(scn)
	if err != nil {
		t.Fatal(err)
	}
	closed, err := bench.NewSystem(scn)
	if err != nil {
		t.Fatal(err)
	}
	const warmup, frames = 200, 1000
	toPhase := func(opd float64) float64 { return math.Pow(2*math.Pi*opd/lambda, 2) }
	var olVar, clVar, estVar float64
	sat, rejected := 0, 0
	line = budgetsim.NewDelayLine(closed, d)
	flat := make([]float32, na)
	open.SetCommand(flat)
	for k := 0; k < warmup+frames; k++ {
		open.Frame(slopes)
		var res controller.Result
		line.Frame(slopes, func() []float32 {
			res = loop.Step(slopes, cmd)
			return cmd
		})
		if !res.OK() {
			rejected++
		}
		if k < warmup {
			continue
		}
		sat += res.Saturated
		olVar += toPhase(open.ResidualRMS()) / frames
		clVar += toPhase(closed.ResidualRMS()) / frames
		estVar += toPhase(res.ResidualRMS) / frames
	}
	if rejected > 0 || sat > 0 {
		t.Errorf("%d frames rejected, %d actuator saturations", rejected, sat)
	}

	// Prediction: the Fourier model of the loop (package analysis) with this
	// reconstructor, gain and the bench's pupil sampling; open loop, piston
	// removed: Δ1 = 1.0299 (D/r0)^(5/3) (Noll 1976, Table IV; infinite outer
	// scale, so an upper bound for L0 = 25 m).
	in, err := budgetsim.Input(scn, closed, r, gain, nil, true)
	if err != nil {
		t.Fatal(err)
	}
	b, err := analysis.Compute(in)
	if err != nil {
		t.Fatal(err)
	}
	noll := 1.0299 * math.Pow(scn.Telescope.Diameter/b.R0, 5.0/3)
	t.Logf("budget (rad²): fitting %.4f + aliasing %.4f + low order %.4f + servo %.4f + noise %.4f = %.4f", b.Fitting, b.Aliasing, b.LowOrder, b.Servo, b.Noise, b.Total)
	t.Logf("closed loop %.4f rad² (Maréchal Strehl %.3f), loop's own estimate %.4f rad²", clVar, math.Exp(-clVar), estVar)
	t.Logf("open loop %.2f rad² (Noll Δ1 %.2f rad²)", olVar, noll)
	if math.Abs(clVar/b.Total-1) > 0.3 {
		t.Errorf("closed-loop residual %.4f rad²: want within 30 %% of the predicted %.4f rad²", clVar, b.Total)
	}
	if !(olVar < noll) {
		t.Errorf("open-loop residual %.2f rad² above Noll's infinite-outer-scale %.2f rad²", olVar, noll)
	}
	t.Logf("closed loop on the bench took %v", time.Since(start))
}

func relDiff(a, b mat.Matrix) float64 {
	var d mat.Dense
	d.Sub(a, b)
	return mat.Norm(&d, 2) / mat.Norm(b, 2)
}

func checkPenrose(t *testing.T, m, r mat.Matrix, tol float64) {
	t.Helper()
	var mr, rm, mrm, rmr mat.Dense
	mr.Mul(m, r)
	rm.Mul(r, m)
	mrm.Mul(&mr, m)
	rmr.Mul(&rm, r)
	for name, e := range map[string]float64{
		"M R M = M": relDiff(&mrm, m), "R M R = R": relDiff(&rmr, r),
		"(M R)ᵀ = M R": relDiff(mr.T(), &mr), "(R M)ᵀ = R M": relDiff(rm.T(), &rm),
	} {
		if !(e < tol) {
			t.Errorf("Penrose condition %s on the measured matrix: relative error %.3g > %g", name, e, tol)
		}
	}
}
