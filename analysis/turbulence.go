package analysis

import (
	"fmt"
	"math"
)

// Wavelength500 is the reference wavelength of r0 and τ0: 500 nm.
const Wavelength500 = 500e-9

// Layer is one frozen-flow layer of the turbulence profile.
type Layer struct {
	// Fraction of the total Cn² integral, in (0, 1].
	Fraction float64
	// WindSpeed in metres per second (>= 0).
	WindSpeed float64
	// WindDirection in radians, counter-clockwise from +x.
	WindDirection float64
}

// Turbulence is a von Kármán turbulence profile seen along one line of sight.
type Turbulence struct {
	// R0 is the Fried parameter at 500 nm towards the zenith, metres.
	R0 float64
	// L0 is the outer scale in metres (+Inf for Kolmogorov turbulence).
	L0 float64
	// ZenithDeg is the zenith angle of the line of sight, degrees in [0, 90).
	ZenithDeg float64
	// Layers carry the winds; their fractions sum to 1.
	Layers []Layer
}

// Validate checks the ranges; fractions must sum to 1 within 1e-6.
func (t Turbulence) Validate() error {
	switch {
	case !(t.R0 > 0) || math.IsInf(t.R0, 0):
		return fmt.Errorf("analysis: r0 %g m: must be > 0", t.R0)
	case !(t.L0 > 0):
		return fmt.Errorf("analysis: L0 %g m: must be > 0", t.L0)
	case !(t.ZenithDeg >= 0 && t.ZenithDeg < 90):
		return fmt.Errorf("analysis: zenith angle %g°: must be in [0, 90)", t.ZenithDeg)
	case len(t.Layers) == 0:
		return fmt.Errorf("analysis: turbulence without layers")
	}
	sum := 0.0
	for i, l := range t.Layers {
		if !(l.Fraction > 0 && l.Fraction <= 1) || !(l.WindSpeed >= 0) || math.IsInf(l.WindSpeed, 0) || math.IsNaN(l.WindDirection) || math.IsInf(l.WindDirection, 0) {
			return fmt.Errorf("analysis: layer %d: fraction %g, wind %g m/s, direction %g rad out of range", i, l.Fraction, l.WindSpeed, l.WindDirection)
		}
		sum += l.Fraction
	}
	if math.Abs(sum-1) > 1e-6 {
		return fmt.Errorf("analysis: layer fractions sum to %g: want 1", sum)
	}
	return nil
}

// airmassFactor is (cos z)^(3/5), the scaling of r0 with zenith angle z.
func airmassFactor(zenithDeg float64) float64 {
	return math.Pow(math.Cos(zenithDeg*math.Pi/180), 0.6)
}

// R0At returns r0 along the line of sight at wavelength lambda:
// r0·(λ/500 nm)^(6/5)·(cos z)^(3/5) (Fried 1966; Roddier 1981).
func (t Turbulence) R0At(lambda float64) float64 {
	return t.R0 * math.Pow(lambda/Wavelength500, 1.2) * airmassFactor(t.ZenithDeg)
}

// R0Zenith500 converts r0 measured along a line of sight at zenith angle
// zenithDeg and wavelength lambda to 500 nm at the zenith (the inverse of R0At).
func R0Zenith500(r0, lambda, zenithDeg float64) float64 {
	return r0 * math.Pow(Wavelength500/lambda, 1.2) / airmassFactor(zenithDeg)
}

// EffectiveWind returns the turbulence-weighted wind speed
// v = (Σ fᵢ vᵢ^(5/3))^(3/5) (Roddier 1981), the speed of the single layer with
// the same temporal structure function of the phase at a point.
func (t Turbulence) EffectiveWind() float64 {
	s := 0.0
	for _, l := range t.Layers {
		s += l.Fraction * math.Pow(l.WindSpeed, 5.0/3)
	}
	return math.Pow(s, 0.6)
}

// Tau0 returns the coherence time at 500 nm towards the zenith,
// τ0 = 0.314 r0/v (Roddier 1981), with v the EffectiveWind: the lag at which the
// temporal structure function of the phase at a point, 6.88 Σ fᵢ (vᵢτ/r0)^(5/3),
// reaches 1 rad² (0.314 = 6.88^(−3/5)).
func (t Turbulence) Tau0() float64 {
	return Tau0(t.R0, t.EffectiveWind())
}

// Tau0 returns 0.314 r0/v (Roddier 1981), +Inf for v = 0.
func Tau0(r0, wind float64) float64 {
	return 0.314 * r0 / wind
}

// PhaseSpectrum returns the von Kármán phase power spectrum at spatial frequency f
// (cycles per metre) for Fried parameter r0 (at the wavelength of interest) and
// outer scale L0: Φ(f) = 0.023 r0^(−5/3) (f² + 1/L0²)^(−11/6) rad² m²
// (Noll 1976; Roddier 1981).
func PhaseSpectrum(f, r0, L0 float64) float64 {
	return 0.023 * math.Pow(r0, -5.0/3) * math.Pow(f*f+1/(L0*L0), -11.0/6)
}

// pistonFilter is 1 − [2 J1(πDf)/(πDf)]², the share of a spatial frequency f that
// is not piston over a circular pupil of diameter D (the squared Fourier transform
// of the pupil's mean; Sasiela, Electromagnetic Wave Propagation in Turbulence, 1994).
func pistonFilter(f, D float64) float64 {
	x := math.Pi * D * f
	if x < 1e-6 {
		return x * x / 4
	}
	a := 2 * math.J1(x) / x
	return 1 - a*a
}
