package analysis

import (
	"fmt"
	"math"
	"math/cmplx"
)

// Loop is the temporal model of a leaky-integrator loop: gain g, leak ℓ, delay d
// frames between a frame and the first frame that sees its command, and the frame
// rate. With modal gains, mode i runs at gain Gain·gᵢ.
type Loop struct {
	Gain, Leak float64
	// Delay in frames (>= 1; the lockstep bench's d).
	Delay int
	// FrameRate in hertz.
	FrameRate float64
}

// maxDelay bounds Delay (the bench models up to 10 frames).
const maxDelay = 10

// Validate checks the ranges and that the loop is stable (every closed-loop pole
// inside the unit circle).
func (l Loop) Validate() error {
	switch {
	case !(l.Gain > 0) || math.IsInf(l.Gain, 0):
		return fmt.Errorf("analysis: gain %g: must be > 0", l.Gain)
	case !(l.Leak >= 0 && l.Leak < 1):
		return fmt.Errorf("analysis: leak %g: must be in [0, 1)", l.Leak)
	case l.Delay < 1 || l.Delay > maxDelay:
		return fmt.Errorf("analysis: delay %d frames: must be in [1, %d]", l.Delay, maxDelay)
	case !(l.FrameRate > 0) || math.IsInf(l.FrameRate, 0):
		return fmt.Errorf("analysis: frame rate %g Hz: must be > 0", l.FrameRate)
	}
	if !l.Stable() {
		return fmt.Errorf("analysis: gain %g with leak %g and %d frames of delay: the loop is unstable (stability limit %.3g)", l.Gain, l.Leak, l.Delay, l.MaxGain())
	}
	return nil
}

// denominator is 1 − (1 − ℓ) z⁻¹ + g z⁻ᵈ at z = e^{jω}.
func (l Loop) denominator(w float64) (den, zi complex128) {
	zi = cmplx.Exp(complex(0, -w))
	den = 1 - complex(1-l.Leak, 0)*zi + complex(l.Gain, 0)*cmplx.Pow(zi, complex(float64(l.Delay), 0))
	return den, zi
}

// omega converts a temporal frequency in hertz to radians per frame.
func (l Loop) omega(f float64) float64 { return 2 * math.Pi * f / l.FrameRate }

// Rejection returns E(e^{j2πf/F}), the rejection (error) transfer function at
// frequency f hertz: the share of a disturbance at f left in the residual.
func (l Loop) Rejection(f float64) complex128 {
	den, zi := l.denominator(l.omega(f))
	return (1 - complex(1-l.Leak, 0)*zi) / den
}

// RejectionPower returns |E(f)|².
func (l Loop) RejectionPower(f float64) float64 {
	e := l.Rejection(f)
	return real(e)*real(e) + imag(e)*imag(e)
}

// NoisePower returns |H(f)|² = |g / (1 − (1 − ℓ) z⁻¹ + g z⁻ᵈ)|², the power
// transfer from measurement noise at f to the residual.
func (l Loop) NoisePower(f float64) float64 {
	den, _ := l.denominator(l.omega(f))
	return l.Gain * l.Gain / (real(den)*real(den) + imag(den)*imag(den))
}

// noiseGainSamples is the number of midpoint samples of [0, π] in NoiseGain;
// |H|² is smooth for a stable loop, and 4096 points give 1e-9 relative accuracy
// away from the stability limit.
const noiseGainSamples = 4096

// NoiseGain returns (1/π)∫₀^π |H(e^{jω})|² dω: the share of white measurement
// noise (its per-frame variance) that stays in the closed-loop residual.
func (l Loop) NoiseGain() float64 {
	s := 0.0
	for i := range noiseGainSamples {
		s += l.NoisePower((float64(i) + 0.5) / noiseGainSamples * l.FrameRate / 2)
	}
	return s / noiseGainSamples
}

// Bandwidth returns the lowest frequency in hertz where |E| reaches 1/√2 (the
// rejection bandwidth), or the Nyquist frequency if it never does below it.
func (l Loop) Bandwidth() float64 {
	lo, hi := 0.0, l.FrameRate/2
	if l.RejectionPower(hi) < 0.5 {
		return hi
	}
	for range 60 {
		mid := (lo + hi) / 2
		if l.RejectionPower(mid) < 0.5 {
			lo = mid
		} else {
			hi = mid
		}
	}
	return lo
}

// Stable reports whether every root of z^d − (1 − ℓ) z^(d−1) + g lies inside the
// unit circle. It counts the encirclements of the origin by the characteristic
// polynomial on the unit circle (the argument principle): a stable loop has all d
// roots inside, a winding number of d.
func (l Loop) Stable() bool {
	const n = 1 << 12
	d := float64(l.Delay)
	wind := 0.0
	prev := 0.0
	for i := 0; i <= n; i++ {
		w := 2 * math.Pi * float64(i) / n
		z := cmplx.Exp(complex(0, w))
		p := cmplx.Pow(z, complex(d, 0)) - complex(1-l.Leak, 0)*cmplx.Pow(z, complex(d-1, 0)) + complex(l.Gain, 0)
		if cmplx.Abs(p) < 1e-12 {
			return false // a root on the unit circle
		}
		a := cmplx.Phase(p)
		if i > 0 {
			da := a - prev
			for da > math.Pi {
				da -= 2 * math.Pi
			}
			for da < -math.Pi {
				da += 2 * math.Pi
			}
			wind += da
		}
		prev = a
	}
	return math.Round(wind/(2*math.Pi)) == float64(l.Delay)
}

// MaxGain returns the largest stable gain for this leak and delay, by bisection
// on Stable (for ℓ = 0 it is 2 sin(π/(2(2d − 1))), the Jury limit).
func (l Loop) MaxGain() float64 {
	lo, hi := 0.0, 2.0+l.Leak
	for range 50 {
		mid := (lo + hi) / 2
		t := l
		t.Gain = mid
		if t.Stable() {
			lo = mid
		} else {
			hi = mid
		}
	}
	return lo
}
