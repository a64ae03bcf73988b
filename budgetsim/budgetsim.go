// Package budgetsim checks the error budget of package analysis against the
// simulated bench: it calibrates a lockstep bench of a scenario as the daemon does
// by default, predicts the budget from the scenario, and runs the closed loop in
// process with parts of the system switched off (sensor noise; the motion of the
// turbulence; the loop's delay) so that each term of the budget is measured on
// its own. It is the engine of `stillsky budget` and of the closed-loop tests.
package budgetsim

import (
	"math"

	"gonum.org/v1/gonum/mat"

	"stillsky/analysis"
	"stillsky/controller"
	"stillsky/sim/bench"
	"stillsky/sim/scenario"
)

// DefaultGain and DefaultLeak are the loop daemon's default integrator gain and leak.
const (
	DefaultGain = 0.4
	DefaultLeak = 0.01
)

// DelayLine models the delay of the lockstep bench: the frame read at step k sees
// the command computed after the frame of step k − d.
type DelayLine struct {
	sys *bench.System
	q   [][]float32
}

// NewDelayLine returns a delay line of d >= 1 frames over sys, all flat.
func NewDelayLine(sys *bench.System, d int) *DelayLine {
	l := &DelayLine{sys: sys}
	for range max(d, 1) {
		l.q = append(l.q, make([]float32, sys.NumActuators()))
	}
	return l
}

// Frame applies the command due now, reads a frame into slopes, and queues the
// command next computes from it.
func (l *DelayLine) Frame(slopes []float32, next func() []float32) {
	l.sys.SetCommand(l.q[0])
	l.sys.Frame(slopes)
	c := next()
	copy(l.q[0], c)
	l.q = append(l.q[1:], l.q[0])
}

// Rig is a calibrated lockstep bench of one scenario.
type Rig struct {
	Scenario *scenario.Scenario
	// Interaction is the measured interaction matrix (slopes × actuators).
	Interaction *mat.Dense
	// Reconstructor is built with the daemon's defaults (truncated SVD,
	// condition 30, piston and unseen modes projected out).
	Reconstructor *controller.Reconstructor
	sys           *bench.System
}

// Calibrate measures the interaction matrix of scenario scn as the daemon does by
// default (single-actuator push–pull pokes of a tenth of the stroke, two frames
// per sign, on the calibration source: no turbulence, no sensor noise) and builds
// the reconstructor.
func Calibrate(scn *scenario.Scenario) (*Rig, error) {
	sys, err := bench.NewSystem(scn)
	if err != nil {
		return nil, err
	}
	sys.SetTurbulence(false)
	sys.SetNoise(false)
	d := scn.Loop.DelayFrames
	ns, na := sys.NumSlopes(), sys.NumActuators()
	cal, err := controller.NewCalibrator(controller.CalibrationConfig{
		Actuators: na, Slopes: ns, Amplitude: 0.1 * scn.DM.Stroke, FramesPerPattern: 2, SettleFrames: d,
	})
	if err != nil {
		return nil, err
	}
	slopes, cmd := make([]float32, ns), make([]float32, na)
	line := NewDelayLine(sys, d)
	for !cal.Done() {
		var ferr error
		line.Frame(slopes, func() []float32 {
			ferr = cal.Feed(slopes)
			cal.Command(cmd)
			return cmd
		})
		if ferr != nil {
			return nil, ferr
		}
	}
	m, err := cal.InteractionMatrix()
	if err != nil {
		return nil, err
	}
	r, err := controller.BuildReconstructor(m, controller.ReconstructorConfig{Method: controller.MethodTruncatedSVD})
	if err != nil {
		return nil, err
	}
	return &Rig{Scenario: scn, Interaction: m, Reconstructor: r, sys: sys}, nil
}

// SensorGeometry returns the sensor's layout as its Describe reports it.
func (r *Rig) SensorGeometry() analysis.SensorGeometry { return sensorGeometry(r.Scenario, r.sys) }

func sensorGeometry(scn *scenario.Scenario, sys *bench.System) analysis.SensorGeometry {
	sensor := sys.Sensor()
	g := analysis.SensorGeometry{Subapertures: sensor.Subapertures(), SubapertureSize: sensor.SubapertureSize(),
		PupilDiameter: scn.Telescope.Diameter, Wavelength: scn.GuideStar.Wavelength,
		Obstruction: scn.Telescope.Obstruction}
	for i, v := range sensor.Valid() {
		if v {
			g.Valid = append(g.Valid, i)
		}
	}
	return g
}

// Input returns the budget input of scenario scn with reconstructor r at the
// given gain (leak 0: set in.Loop.Leak; the scenario's delay and frame rate). sys supplies the
// geometry of the sensor and mirror as they describe themselves (positions,
// pitch, coupling, slope noise). With benchSampling the wavefront stops at the
// Nyquist frequency of the bench's pupil sampling, as the simulated one does;
// without it the budget is that of a real atmosphere.
func Input(scn *scenario.Scenario, sys *bench.System, r *controller.Reconstructor, gain float64, modalGains []float64, benchSampling bool) (analysis.BudgetInput, error) {
	t := Turbulence(scn)
	m := sys.Mirror()
	in := analysis.BudgetInput{
		Optics: analysis.Optics{Diameter: scn.Telescope.Diameter, Subaperture: scn.SubapertureSize(),
			Pitch: m.Pitch(), ScienceWavelength: scn.Science.Wavelength, Coupling: m.Coupling()},
		Turbulence: t,
		Loop:       analysis.Loop{Gain: gain, Delay: max(scn.Loop.DelayFrames, 1), FrameRate: scn.Loop.FrameRate},
		ModalGains: modalGains,
	}
	if benchSampling {
		in.Optics.MaxFrequency = 1 / (2 * sys.Pupil().Scale)
		per := scn.Telescope.PupilSamples / scn.WFS.Subapertures
		in.Optics.GradientSpan = float64(per-1) * sys.Pupil().Scale
	}
	if scn.WFS.Noise && scn.WFS.Mode == scenario.ModeGeometric {
		sensor := sys.Sensor()
		noise := make([]float64, sensor.NumSlopes())
		for j := range noise {
			noise[j] = sensor.SlopeNoise(j / 2)
		}
		surf, err := analysis.NewSurface(scn.Telescope.Diameter, scn.Telescope.Obstruction,
			analysis.Mirror{Positions: m.Positions(), Pitch: m.Pitch(), Coupling: m.Coupling()}, 4)
		if err != nil {
			return in, err
		}
		mn, err := analysis.PropagateNoise(r, noise, surf)
		if err != nil {
			return in, err
		}
		in.ModalNoise = mn
	}
	surf, err := analysis.NewSurface(scn.Telescope.Diameter, scn.Telescope.Obstruction,
		analysis.Mirror{Positions: m.Positions(), Pitch: m.Pitch(), Coupling: m.Coupling()}, 4)
	if err != nil {
		return in, err
	}
	if in.LowOrder, err = analysis.LowOrderCorrection(r, sensorGeometry(scn, sys), surf); err != nil {
		return in, err
	}
	return in, nil
}

// Turbulence returns the scenario's turbulence profile.
func Turbulence(scn *scenario.Scenario) analysis.Turbulence {
	a := scn.Atmosphere
	t := analysis.Turbulence{R0: a.R0, L0: a.L0, ZenithDeg: a.ZenithDeg}
	for _, l := range a.Layers {
		t.Layers = append(t.Layers, analysis.Layer{Fraction: l.Fraction, WindSpeed: l.WindSpeed,
			WindDirection: l.WindDirectionDeg * math.Pi / 180})
	}
	return t
}

// Predict returns the analytic budget of the rig at gain and leak (modal gains
// nil for all 1); benchSampling as in Input.
func (r *Rig) Predict(gain, leak float64, modalGains []float64, benchSampling bool) (analysis.Budget, error) {
	in, err := Input(r.Scenario, r.sys, r.Reconstructor, gain, modalGains, benchSampling)
	if err != nil {
		return analysis.Budget{}, err
	}
	in.Loop.Leak = leak
	return analysis.Compute(in)
}

// RunConfig chooses one closed-loop run.
type RunConfig struct {
	// Gain, Leak and ModalGains (nil: 1 each) of the integrator.
	Gain, Leak float64
	ModalGains []float64
	// Seed of the turbulence and noise (0: the scenario's).
	Seed int64
	// R0 replaces the scenario's r0 (metres at 500 nm, zenith) when > 0; the
	// calibration does not depend on it.
	R0 float64
	// NoNoise turns the sensor noise off; Frozen stops the layers.
	NoNoise, Frozen bool
	// NoDelay runs the ideal loop with no delay at gain 1: each frame's command
	// is computed from its own slopes and applied to that same frame before the
	// residual is taken, so the residual is what the sensor and mirror cannot
	// see or form (fitting and aliasing) whatever the turbulence's speed. Gain is
	// ignored.
	NoDelay bool
	// Warmup frames are run before Frames are measured.
	Warmup, Frames int
	// StrehlEvery frames a science PSF joins the long exposure (0: no Strehl).
	StrehlEvery int
	// Frame, if set, is called for every measured frame with its slopes and the
	// command the mirror held during its exposure (both the rig's own buffers).
	Frame func(slopes, applied []float32)
	// Fitting also measures the fitting error: the residual of the best
	// least-squares mirror fit to the turbulence, every StrehlEvery-th frame (or
	// every 10th without Strehl), and the loop's under-correction of the modes of
	// analysis.LowOrderCorrection (Measured.LowOrder).
	Fitting bool
}

// Measured is what a run measured, variances in rad² at the science wavelength.
type Measured struct {
	// Residual is the mean over frames of the residual phase variance (piston
	// removed).
	Residual float64
	// HighOrder is the mean over frames of the residual phase variance with
	// piston, tip and tilt removed.
	HighOrder float64
	// Strehl is the long-exposure Strehl ratio of the science PSF.
	Strehl float64
	// Fitting is the mean variance left by the best mirror fit (RunConfig.Fitting).
	Fitting float64
	// LowOrder is the mean variance of the part of the loop's residual in the
	// low-order modes that is a fixed share of the turbulence's own coefficient
	// of each: the loop's steady-state under-correction (RunConfig.Fitting).
	LowOrder float64
	// Saturated counts actuator clips, Rejected refused frames.
	Saturated, Rejected int
}

// Run runs the closed loop on a fresh bench of the rig's scenario (with c.Seed),
// converged over Warmup frames, and measures Frames frames.
func (r *Rig) Run(c RunConfig) (Measured, error) {
	scn := *r.Scenario
	if c.Seed != 0 {
		scn.Atmosphere.Seed = c.Seed
	}
	if c.R0 > 0 {
		scn.Atmosphere.R0 = c.R0
	}
	sys, err := bench.NewSystem(&scn)
	if err != nil {
		return Measured{}, err
	}
	sys.SetNoise(scn.WFS.Noise && !c.NoNoise)
	sys.SetFrozen(c.Frozen)
	gain := c.Gain
	if c.NoDelay {
		gain = 1
	}
	leak := c.Leak
	if c.NoDelay {
		leak = 0
	}
	p, err := controller.NewParams(controller.ParamsConfig{Reconstructor: r.Reconstructor, Gain: gain, Leak: leak,
		ModalGains: c.ModalGains, Stroke: scn.DM.Stroke, StrehlWavelength: scn.Science.Wavelength})
	if err != nil {
		return Measured{}, err
	}
	defer p.Close()
	loop, err := controller.NewLoop(p)
	if err != nil {
		return Measured{}, err
	}
	var fit *fitter
	var low *underCorrection
	if c.Fitting {
		fit = newFitter(sys)
		low = newUnderCorrection(sys.Pupil())
	}
	lambda := scn.Science.Wavelength
	toPhase := func(opd float64) float64 { return math.Pow(2*math.Pi*opd/lambda, 2) }
	ns, na := sys.NumSlopes(), sys.NumActuators()
	slopes, cmd, scratch, applied := make([]float32, ns), make([]float32, na), make([]float32, ns), make([]float32, na)
	line := NewDelayLine(sys, scn.Loop.DelayFrames)
	var m Measured
	fitEvery := c.StrehlEvery
	if fitEvery == 0 {
		fitEvery = 10
	}
	nfit := 0
	for k := range c.Warmup + c.Frames {
		var res controller.Result
		if c.NoDelay {
			sys.Advance()
			copy(applied, cmd)
			sys.Observe(cmd, slopes)
			res = loop.Step(slopes, cmd)
			sys.Observe(cmd, scratch)
		} else {
			copy(applied, line.q[0])
			line.Frame(slopes, func() []float32 {
				res = loop.Step(slopes, cmd)
				return cmd
			})
		}
		if c.Frame != nil && k >= c.Warmup {
			c.Frame(slopes, applied)
		}
		if k < c.Warmup {
			continue
		}
		if !res.OK() {
			m.Rejected++
		}
		m.Saturated += res.Saturated
		m.Residual += toPhase(sys.ResidualRMS()) / float64(c.Frames)
		m.HighOrder += toPhase(sys.ResidualRMSNoTilt()) / float64(c.Frames)
		if c.StrehlEvery > 0 && (k-c.Warmup)%c.StrehlEvery == 0 {
			sys.Expose()
		}
		if fit != nil && (k-c.Warmup)%fitEvery == 0 {
			m.Fitting += toPhase(fit.residualRMS(sys))
			low.add(sys.Residual(), sys.Atmosphere())
			nfit++
		}
	}
	if nfit > 0 {
		m.Fitting /= float64(nfit)
		m.LowOrder = toPhase(math.Sqrt(low.variance(nfit)))
	}
	if c.StrehlEvery > 0 {
		m.Strehl = sys.ExposureStrehl()
	}
	return m, nil
}

// Terms is a budget measured by simulation, rad² at the science wavelength.
type Terms struct {
	// Aliasing includes the low-order under-correction, of which LowOrder is
	// the regressed part (see Decompose).
	Fitting, Aliasing, Servo, Noise, LowOrder, Total float64
	// Strehl is the long-exposure Strehl ratio of the full run.
	Strehl float64
}

// Decompose measures each term with the same turbulence (seed) in four runs:
// the full loop (Total, Strehl); noise off (Total − it is Noise); the loop with
// no delay, noise off (fitting and aliasing; the best mirror fit to the same
// turbulence gives Fitting, the rest is Aliasing); and Servo is what the delayed
// noise-free loop adds to the loop with no delay. Aliasing therefore holds the
// loop's steady-state under-correction of the low-order modes too (the analytic
// budget's LowOrder term); LowOrder is that part as the no-delay loop shows it
// (Measured.LowOrder), a regression that also picks up the coupling between modes.
func (r *Rig) Decompose(gain, leak float64, seed int64, warmup, frames, strehlEvery int) (Terms, error) {
	full, err := r.Run(RunConfig{Gain: gain, Leak: leak, Seed: seed, Warmup: warmup, Frames: frames, StrehlEvery: strehlEvery})
	if err != nil {
		return Terms{}, err
	}
	quiet, err := r.Run(RunConfig{Gain: gain, Leak: leak, Seed: seed, NoNoise: true, Warmup: warmup, Frames: frames})
	if err != nil {
		return Terms{}, err
	}
	ideal, err := r.Run(RunConfig{Seed: seed, NoNoise: true, NoDelay: true, Warmup: warmup, Frames: frames, Fitting: true})
	if err != nil {
		return Terms{}, err
	}
	return Terms{
		Fitting: ideal.Fitting, Aliasing: ideal.Residual - ideal.Fitting, LowOrder: ideal.LowOrder,
		Servo: quiet.Residual - ideal.Residual, Noise: full.Residual - quiet.Residual,
		Total: full.Residual, Strehl: full.Strehl,
	}, nil
}
