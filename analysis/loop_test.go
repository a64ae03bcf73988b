package analysis

import (
	"math"
	"testing"
)

func TestMaxGainJury(t *testing.T) {
	// Stability limit of the pure integrator with d frames of delay:
	// g_max = 2 sin(π/(2(2d − 1))): 2, 1, 0.618 for d = 1, 2, 3 (docs/control-law.md,
	// "Stability limit of the pure integrator"; Jury 1964, from memory).
	for d := 1; d <= 4; d++ {
		want := 2 * math.Sin(math.Pi/(2*(2*float64(d)-1)))
		got := Loop{Gain: 0.1, Delay: d, FrameRate: 1000}.MaxGain()
		if math.Abs(got-want) > 1e-5 {
			t.Errorf("d = %d: max gain %.6f, want %.6f", d, got, want)
		}
	}
}

func TestRejectionProperties(t *testing.T) {
	l := Loop{Gain: 0.4, Leak: 0.01, Delay: 2, FrameRate: 1000}
	// Constant disturbance: the residual is ℓ/(ℓ + g) of it (final-value theorem;
	// docs/control-law.md, "Steady-state residual").
	if got, want := math.Sqrt(l.RejectionPower(0)), 0.01/0.41; math.Abs(got-want) > 1e-12 {
		t.Errorf("|E(0)| = %g, want ℓ/(ℓ+g) = %g", got, want)
	}
	// E(z) + g z⁻ᵈ/(1 − (1 − ℓ) z⁻¹ + g z⁻ᵈ) = 1: the residual and the correction
	// add up to the disturbance at every frequency (docs/control-law.md, "Model").
	for _, f := range []float64{1, 37, 250, 499} {
		den, zi := l.denominator(l.omega(f))
		h := complex(l.Gain, 0) * zi * zi / den
		if s := l.Rejection(f) + h; math.Abs(real(s)-1) > 1e-12 || math.Abs(imag(s)) > 1e-12 {
			t.Errorf("f = %g Hz: E + H = %v, want 1", f, s)
		}
	}
	// Noise gain of the pure integrator with one frame of delay is g/(2 − g)
	// (the variance of an AR(1) process c_k = (1 − g) c_{k−1} + g n_k).
	for _, g := range []float64{0.2, 0.5, 1} {
		got := Loop{Gain: g, Delay: 1, FrameRate: 1}.NoiseGain()
		if want := g / (2 - g); math.Abs(got-want) > 1e-6*want {
			t.Errorf("noise gain at g = %g, d = 1: %g, want g/(2 − g) = %g", g, got, want)
		}
	}
}
