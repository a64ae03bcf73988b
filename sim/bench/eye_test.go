package bench

import (
	"errors"
	"testing"

	"gonum.org/v1/gonum/mat"

	"stillsky/sim/scenario"
)

// TestEyeClosesLockstep closes the loop on the eye scenario in lockstep: a
// push–pull interaction matrix, gonum's SVD pseudo-inverse and a leaky
// integrator take the long-exposure Strehl ratio at the 900 nm science
// wavelength from below 0.05 (the eye's 1–2 µm of defocus and astigmatism,
// Thibos et al. 2002, JOSA A 19, 2329, values from memory) to above 0.5: at
// 30 Hz with one frame of delay the integrator's bandwidth, about gain·rate/2π
// ≈ 2 Hz (common practice), follows the eye's 1–2 Hz accommodation only in part,
// so the criterion is the Maréchal-range Strehl, not the diffraction limit.
func TestEyeClosesLockstep(t *testing.T) {
	sc := load(t, "eye")
	sys := newSystem(t, sc)
	d := interaction(sys, 50e-9)
	r, kept := pseudoInverse(t, d, 0.05)
	t.Logf("%d slopes, %d actuators, %d modes kept", sys.NumSlopes(), sys.NumActuators(), kept)
	sys.SetTurbulence(true)
	sys.SetNoise(true)
	ns, na := sys.NumSlopes(), sys.NumActuators()
	slopes := make([]float32, ns)
	sys.SetCommand(make([]float32, na))
	for k := range 300 {
		sys.Frame(slopes)
		if k%3 == 0 {
			sys.Expose()
		}
	}
	open := sys.ExposureStrehl()
	sys.ResetExposure()

	const gain, leak, frames, settle = 0.5, 0.002, 600, 60
	c := mat.NewVecDense(na, nil)
	var rs mat.VecDense
	s64 := mat.NewVecDense(ns, nil)
	next := make([]float32, na)
	for k := range frames {
		sys.Frame(slopes)
		if k >= settle && k%3 == 0 {
			sys.Expose()
		}
		for i, v := range slopes {
			s64.SetVec(i, float64(v))
		}
		rs.MulVec(r, s64)
		c.AddScaledVec(c, -leak, c)
		c.AddScaledVec(c, -gain, &rs)
		for i := range next {
			next[i] = float32(c.AtVec(i))
		}
		sys.SetCommand(next) // seen by the next frame: one frame of delay
	}
	closed := sys.ExposureStrehl()
	t.Logf("900 nm exposure Strehl: open loop %.4f, closed loop %.3f (last residual %.1f nm rms)", open, closed, sys.ResidualRMS()*1e9)
	if open > 0.05 {
		t.Errorf("open-loop Strehl %.4f: want <= 0.05", open)
	}
	if closed < 0.5 {
		t.Errorf("closed-loop Strehl %.3f: want >= 0.5", closed)
	}
}

// TestEyeExposureRefused: the bench refuses an eye whose beacon energy is above
// the configured limit even when the scenario was changed after Parse.
func TestEyeExposureRefused(t *testing.T) {
	sc := load(t, "eye")
	sc.Eye.BeaconPower = 2 * sc.Eye.ExposureLimit / sc.Eye.BeaconExposure
	_, err := NewSystem(sc)
	if !errors.Is(err, scenario.ErrExposure) {
		t.Fatalf("NewSystem with twice the limit: %v, want ErrExposure", err)
	}
	t.Log(err)
}

// TestEyeFrameAllocatesNothing: the eye's Advance and OPD are on the hot path.
func TestEyeFrameAllocatesNothing(t *testing.T) {
	sys := newSystem(t, load(t, "eye"))
	slopes := make([]float32, sys.NumSlopes())
	if n := testing.AllocsPerRun(50, func() { sys.Frame(slopes) }); n != 0 {
		t.Errorf("Frame allocates %v times per call, want 0", n)
	}
}
