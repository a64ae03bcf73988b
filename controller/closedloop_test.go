package controller_test

import (
	"math"
	"math/cmplx"
	"testing"
	"time"

	"gonum.org/v1/gonum/mat"

	"stillsky/controller"
	"stillsky/sim/bench"
	"stillsky/sim/scenario"
)

// delayLine models the loop delay of the lockstep bench: the sensor reading frame
// k sees the command computed after frame k − d.
type delayLine struct {
	sys *bench.System
	q   [][]float32
}

func newDelayLine(sys *bench.System, d int) *delayLine {
	l := &delayLine{sys: sys}
	for range d {
		l.q = append(l.q, make([]float32, sys.NumActuators()))
	}
	return l
}

// frame applies the command due now, reads a frame into slopes, and queues cmd
// (the command computed from this frame).
func (l *delayLine) frame(slopes []float32, next func() []float32) {
	l.sys.SetCommand(l.q[0])
	l.sys.Frame(slopes)
	c := next()
	l.q = append(l.q[1:], append([]float32(nil), c...))
}

// errorTransfer is |E(e^{jω})| of the leaky integrator with delay d
// (docs/control-law.md, "Model", ℓ = 0).
func errorTransfer(w, g float64, d int) float64 {
	zi := cmplx.Exp(complex(0, -w))
	return cmplx.Abs((1 - zi) / (1 - zi + complex(g, 0)*cmplx.Pow(zi, complex(float64(d), 0))))
}

// noiseGain is (1/2π)∫|g/(1 − z⁻¹ + g z⁻ᵈ)|² dω, the fraction of the per-frame
// reconstructed noise variance that stays in the closed-loop residual (standard
// discrete-time control: the noise-to-command transfer of the same loop).
func noiseGain(g float64, d int) float64 {
	const n = 1 << 14
	s := 0.0
	for i := range n {
		w := math.Pi * (float64(i) + 0.5) / n
		zi := cmplx.Exp(complex(0, -w))
		h := complex(g, 0) / (1 - zi + complex(g, 0)*cmplx.Pow(zi, complex(float64(d), 0)))
		s += real(h * cmplx.Conj(h))
	}
	return s / n
}

// bandwidth3dB returns the lowest frequency (Hz) where |E| reaches 1/√2.
func bandwidth3dB(g float64, d int, rate float64) float64 {
	lo, hi := 1e-6, math.Pi
	for range 60 {
		mid := (lo + hi) / 2
		if errorTransfer(mid, g, d) < 1/math.Sqrt2 {
			lo = mid
		} else {
			hi = mid
		}
	}
	return lo / (2 * math.Pi) * rate
}

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
	line := newDelayLine(sys, d)
	for !cal.Done() {
		line.frame(slopes, func() []float32 {
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
	line = newDelayLine(closed, d)
	flat := make([]float32, na)
	open.SetCommand(flat)
	for k := 0; k < warmup+frames; k++ {
		open.Frame(slopes)
		var res controller.Result
		line.frame(slopes, func() []float32 {
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

	// Prediction at the science wavelength, r0 along the line of sight
	// (r0 ∝ λ^(6/5) (cos z)^(3/5), Fried 1966; Roddier 1981).
	r0 := scn.Atmosphere.R0 * math.Pow(lambda/500e-9, 1.2) * math.Pow(math.Cos(scn.Atmosphere.ZenithDeg*math.Pi/180), 0.6)
	diam := scn.Telescope.Diameter
	pitch := closed.Mirror().Pitch()
	// Open loop, piston removed: Δ1 = 1.0299 (D/r0)^(5/3) (Noll 1976, Table IV;
	// infinite outer scale, so an upper bound for L0 = 25 m).
	noll := 1.0299 * math.Pow(diam/r0, 5.0/3)
	// Fitting error of a continuous face-sheet mirror, a_F = 0.28 (Hudgin 1977,
	// from memory), and Shack–Hartmann aliasing of about a third of it (Hardy 1998,
	// from memory).
	fitting := 0.28 * math.Pow(pitch/r0, 5.0/3)
	aliasing := fitting / 3
	// Servo lag (f_G/f_3dB)^(5/3) (Greenwood 1977) with the layered Greenwood
	// frequency 0.427 v/r0, v = (Σ fᵢ vᵢ^(5/3))^(3/5) (Greenwood 1977, from memory
	// for the weighting), and f_3dB where |E| = 1/√2 for this gain and delay.
	var v53 float64
	for _, l := range scn.Atmosphere.Layers {
		v53 += l.Fraction * math.Pow(l.WindSpeed, 5.0/3)
	}
	fG := 0.427 * math.Pow(v53, 0.6) / r0
	f3 := bandwidth3dB(gain, d, scn.Loop.FrameRate)
	servo := math.Pow(fG/f3, 5.0/3)
	// Noise: the sensor's slope noise through R (2× for reflection, rms over
	// actuators) times the loop's noise gain.
	var nvar float64
	sensor := closed.Sensor()
	for i := 0; i < na; i++ {
		for j := 0; j < ns; j++ {
			s := sensor.SlopeNoise(j / 2)
			nvar += math.Pow(r.Control.At(i, j)*s, 2)
		}
	}
	noise := toPhase(2*math.Sqrt(nvar/float64(na))) * noiseGain(gain, d)
	predicted := fitting + aliasing + servo + noise
	t.Logf("r0 %.3f m at %.2g m; f_G %.1f Hz, f_3dB %.1f Hz", r0, lambda, fG, f3)
	t.Logf("budget (rad²): fitting %.4f + aliasing %.4f + servo %.4f + noise %.4f = %.4f", fitting, aliasing, servo, noise, predicted)
	t.Logf("closed loop %.4f rad² (Maréchal Strehl %.3f), loop's own estimate %.4f rad²", clVar, math.Exp(-clVar), estVar)
	// The open loop sits below Noll's value: a 25 m outer scale removes much of the
	// tilt. The predicted reduction is therefore measured open loop / budget.
	t.Logf("open loop %.2f rad² (Noll Δ1 %.2f rad²): reduction measured %.0f×, predicted %.0f× (%.0f× from Noll)",
		olVar, noll, olVar/clVar, olVar/predicted, noll/predicted)
	// Tolerance: a factor 2 on the residual variance covers the spread of a_F
	// (0.23–0.35), the rough aliasing share and the single-pole servo model.
	if !(clVar > predicted/2 && clVar < 2*predicted) {
		t.Errorf("closed-loop residual %.4f rad²: want within a factor 2 of the predicted %.4f rad²", clVar, predicted)
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
