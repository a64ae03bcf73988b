package analysis

import (
	"math"
	"testing"
)

func kolmogorov(r0 float64, layers ...Layer) Turbulence {
	return Turbulence{R0: r0, L0: math.Inf(1), Layers: layers}
}

func TestFittingCoefficient(t *testing.T) {
	// σ² = a_F (p/r0)^(5/3): an ideal square-band corrector gives the low end of the
	// 0.23–0.35 range of continuous face-sheet mirrors (Hudgin, JOSA 67 (1977) 393,
	// from memory); a circular band of radius 1/(2p) gives
	// 0.023·2π·(3/5)·2^(5/3) = 0.275 ≈ Hudgin's 0.28 (from memory), which bounds it above.
	o := Optics{Diameter: 8, Subaperture: 0.2, Pitch: 0.2, ScienceWavelength: Wavelength500}
	aF := FittingVariance(o, kolmogorov(0.1, Layer{Fraction: 1})) / math.Pow(0.2/0.1, 5.0/3)
	t.Logf("a_F of the square band: %.4f", aF)
	if !(aF > 0.20 && aF < 0.275) {
		t.Errorf("a_F = %.4f: want in (0.20, 0.275)", aF)
	}
	// A real face-sheet mirror, Gaussian influence functions of coupling 0.15 as
	// the simulated one's: its least-squares fit is worse than the ideal band's,
	// and inside Hudgin's 0.23–0.35 for continuous face-sheet mirrors (from memory).
	o.Coupling = 0.15
	aG := FittingVariance(o, kolmogorov(0.1, Layer{Fraction: 1})) / math.Pow(0.2/0.1, 5.0/3)
	t.Logf("a_F of a Gaussian-influence mirror, coupling 0.15: %.4f", aG)
	if !(aG > aF && aG > 0.23 && aG < 0.35) {
		t.Errorf("a_F = %.4f with coupling 0.15: want above the ideal %.4f and in (0.23, 0.35)", aG, aF)
	}
}

func TestServoGreenwood(t *testing.T) {
	// For a first-order rejection |E|² = f²/(f² + f3²) and a single Kolmogorov layer,
	// σ² = (f_G/f_3dB)^(5/3) with f_G = 0.427 v/r0 (Greenwood, JOSA 67 (1977) 390).
	// A pure integrator sampled 100 times faster than its bandwidth, one frame of
	// delay, is that filter with f_3dB = g·F/(2π). Greenwood's phase is that of a
	// point, piston included: the pupil is made so wide that removing its piston
	// takes nothing, and the corrected band reaches far beyond f_3dB/v.
	const r0, v, rate, g = 0.5, 10.0, 1e5, 0.05
	l := Loop{Gain: g, Delay: 1, FrameRate: rate}
	o := Optics{Diameter: 1e5, Subaperture: 0.0005, Pitch: 0.0005, ScienceWavelength: Wavelength500}
	servo, _, _ := bandVariances(o, kolmogorov(r0, Layer{Fraction: 1, WindSpeed: v}), l)
	f3 := g * rate / (2 * math.Pi)
	want := math.Pow(0.427*v/r0/f3, 5.0/3)
	t.Logf("servo %.6f rad², Greenwood %.6f rad² (f_3dB %.1f Hz, loop's %.1f Hz)", servo, want, f3, l.Bandwidth())
	if math.Abs(servo/want-1) > 0.03 {
		t.Errorf("servo %.6f rad²: want Greenwood's %.6f within 3%%", servo, want)
	}
}

func TestMirrorKappa(t *testing.T) {
	// The share κ of an in-band wave that a least-squares loop forms with a
	// Gaussian-influence mirror (coupling 0.15) on a Fried-geometry sensor of
	// pitch d. At the sampling's Nyquist frequency 1/(2d) the subapertures see
	// only the wave's cosine phase (Shannon's sampling theorem: the sine phase
	// vanishes at every sample), and the mirror's image at −1/(2d) shares it,
	// so κ = 1/2 whatever the coupling and the gradient span. (Slow waves are
	// not formed whole either: the images' slopes do not cancel to first order
	// in f, and κ tends to 0.96 for coupling 0.15 and a span of 3d/4, near the
	// 0.957 that the default bench's reconstructor forms of its low-order Zernike
	// modes; that is logged, not checked.)
	const d = 0.25
	for _, c := range []float64{0.1, 0.15, 0.3} {
		g := gaussianTransform(c, d)
		for _, span := range []float64{d, 0.75 * d} {
			edge := mirrorKappa(0.999999/(2*d), 0, d, span, g)
			slow := mirrorKappa(0.01/d, 0, d, span, g)
			t.Logf("coupling %.2f, span %.2f d: κ %.4f at the band edge, %.4f at 0.01/d", c, span/d, edge, slow)
			if math.Abs(edge-0.5) > 1e-3 {
				t.Errorf("coupling %g, span %g: κ at the band edge %.4f: want 0.5", c, span, edge)
			}
		}
	}
}
