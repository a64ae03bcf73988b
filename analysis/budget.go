package analysis

import (
	"fmt"
	"math"

	"stillsky/sim/optics"
)

// Optics is what the error budget needs of the telescope, sensor and mirror.
type Optics struct {
	// Diameter of the pupil in metres.
	Diameter float64
	// Subaperture is the Shack–Hartmann subaperture side on the pupil, metres: the
	// sampling step of the slopes.
	Subaperture float64
	// Pitch is the actuator pitch on the pupil, metres (Fried geometry: equal to
	// Subaperture). The mirror corrects spatial frequencies |fx|, |fy| < 1/(2·Pitch).
	Pitch float64
	// ScienceWavelength in metres: the wavelength of every variance in the budget.
	ScienceWavelength float64
	// GradientSpan, if > 0, is the distance in metres across which the sensor
	// differences the wavefront in each subaperture: it measures
	// (φ(x + s/2) − φ(x − s/2))/s averaged across the subaperture. An optical
	// Shack–Hartmann measures the mean gradient, s = Subaperture (0 means that);
	// one that differences pupil samples δ apart, n per subaperture, spans
	// s = (n − 1)δ, which averages less and aliases more.
	GradientSpan float64
	// MaxFrequency, if > 0, is the highest spatial frequency (cycles per metre, on
	// each axis) the wavefront contains. A real atmosphere has none (0); a
	// simulated one sampled every δ metres stops at 1/(2δ), which lowers its
	// fitting and aliasing errors.
	MaxFrequency float64
	// Coupling, if > 0, is the mirror's influence function at a neighbouring
	// actuator, in (0, 1): each actuator's surface is the separable Gaussian
	// c^((x/p)²)·c^((y/p)²), as the simulated mirror's and analysis.Mirror's.
	// The fitting term is then that mirror's least-squares fit; 0 is an ideal
	// corrector that forms the band |fx|, |fy| < 1/(2p) exactly and nothing beyond.
	Coupling float64
}

// Validate checks the ranges.
func (o Optics) Validate() error {
	switch {
	case !(o.Diameter > 0) || math.IsInf(o.Diameter, 0):
		return fmt.Errorf("analysis: pupil diameter %g m: must be > 0", o.Diameter)
	case !(o.Subaperture > 0 && o.Subaperture <= o.Diameter):
		return fmt.Errorf("analysis: subaperture %g m: must be in (0, diameter %g m]", o.Subaperture, o.Diameter)
	case !(o.Pitch > 0 && o.Pitch <= o.Diameter):
		return fmt.Errorf("analysis: actuator pitch %g m: must be in (0, diameter %g m]", o.Pitch, o.Diameter)
	case !(o.ScienceWavelength > 0) || math.IsInf(o.ScienceWavelength, 0):
		return fmt.Errorf("analysis: science wavelength %g m: must be > 0", o.ScienceWavelength)
	case !(o.GradientSpan >= 0 && o.GradientSpan <= o.Subaperture):
		return fmt.Errorf("analysis: gradient span %g m: must be in [0, subaperture %g m]", o.GradientSpan, o.Subaperture)
	case !(o.MaxFrequency >= 0) || math.IsInf(o.MaxFrequency, 0):
		return fmt.Errorf("analysis: maximum spatial frequency %g /m: must be >= 0 and finite", o.MaxFrequency)
	case !(o.Coupling >= 0 && o.Coupling < 1):
		return fmt.Errorf("analysis: influence-function coupling %g: must be in [0, 1)", o.Coupling)
	case o.MaxFrequency > 0 && o.MaxFrequency <= 1/(2*o.Pitch):
		return fmt.Errorf("analysis: maximum spatial frequency %g /m: must be above the mirror's cut-off %g /m", o.MaxFrequency, 1/(2*o.Pitch))
	}
	return nil
}

// BudgetInput is everything Compute needs.
type BudgetInput struct {
	Optics     Optics
	Turbulence Turbulence
	Loop       Loop
	// ModalNoise is the per-frame surface variance (m², piston removed, averaged
	// over the pupil) that white slope noise puts into each controlled mode at unit
	// gain, as PropagateNoise returns it; nil leaves the noise term out.
	ModalNoise []float64
	// LowOrder holds the steady-state correction κ_j of Noll modes 2 … as
	// LowOrderCorrection returns it; nil leaves the low-order term out.
	LowOrder []float64
	// ModalGains are the relative gains of those modes (nil: 1 each); mode i runs
	// at Loop.Gain·ModalGains[i]. They change only the noise term: the servo and
	// aliasing terms use Loop.Gain.
	ModalGains []float64
}

// Budget is the predicted residual phase variance by term, in rad² at Wavelength.
type Budget struct {
	// Wavelength of the variances, metres.
	Wavelength float64
	// R0 along the line of sight at Wavelength, metres.
	R0 float64
	// Fitting: the wavefront the mirror cannot form, spatial frequencies beyond
	// 1/(2·pitch).
	Fitting float64
	// Aliasing: high spatial frequencies the Shack–Hartmann sensor folds into the
	// corrected band, filtered by the loop.
	Aliasing float64
	// AliasingNoDelay is the aliasing of a loop with no delay at gain 1, which
	// passes every aliased frequency whole (|H| = 1): the run with which the
	// bench's isolation mode measures fitting and aliasing. It is not part of
	// Total; Aliasing − AliasingNoDelay is what the delayed loop's temporal
	// filter changes, and the bench books it under servo.
	AliasingNoDelay float64
	// Servo: the corrected band's residual from the loop's finite speed, the
	// rejection |E|² integrated against the temporal spectrum of each layer.
	Servo float64
	// Noise: slope noise through the control matrix and the loop's noise gain.
	Noise float64
	// LowOrder: the share of the lowest Zernike modes the loop leaves in steady
	// state because the mirror's edge cannot form them as the sensor sees them,
	// Σⱼ Vⱼ [(1 − κⱼ g/(g + ℓ))² − (ℓ/(g + ℓ))²] with Vⱼ Noll's von Kármán variance
	// of mode j (the leak's own share, (ℓ/(g + ℓ))² Vⱼ, is in Servo).
	LowOrder float64
	// BandEdge is the part of LowOrder above those modes: the share of the band
	// the loop leaves in steady state because a real mirror (Optics.Coupling)
	// forms a command wave with images 1/pitch away, which the sensor folds back
	// onto it (bandEdgeVariance); 0 for an ideal corrector.
	BandEdge float64
	// Total is the sum of the terms (they are uncorrelated).
	Total float64
	// Strehl is the Maréchal approximation exp(−Total) (Mahajan, JOSA 73 (1983) 860).
	Strehl float64
}

// NM converts a variance in rad² at the budget's wavelength to nanometres rms of
// optical path: √σ²·λ/(2π).
func (b Budget) NM(variance float64) float64 {
	return math.Sqrt(variance) * b.Wavelength / (2 * math.Pi) * 1e9
}

// Compute returns the error budget. The fitting, aliasing and servo terms come
// from the Fourier model of a Shack–Hartmann loop (Rigaut, Véran & Lai, SPIE 3353
// (1998) 1038; Jolissaint, Véran & Conan, JOSA A 23 (2006) 382): the mirror
// corrects the square band |fx|, |fy| < 1/(2p) and nothing beyond it; the sensor
// measures the mean gradient over each subaperture, sampled at its side; the
// reconstructor is the least-squares inverse of that measurement in the band; each
// layer carries its spatial frequencies across the pupil at its wind, so frequency
// f appears at the temporal frequency f·v. Piston is left out throughout.
func Compute(in BudgetInput) (Budget, error) {
	if err := in.Optics.Validate(); err != nil {
		return Budget{}, err
	}
	if err := in.Turbulence.Validate(); err != nil {
		return Budget{}, err
	}
	if err := in.Loop.Validate(); err != nil {
		return Budget{}, err
	}
	if in.ModalGains != nil && len(in.ModalGains) != len(in.ModalNoise) {
		return Budget{}, fmt.Errorf("analysis: %d modal gains for %d modes of noise", len(in.ModalGains), len(in.ModalNoise))
	}
	lambda := in.Optics.ScienceWavelength
	b := Budget{Wavelength: lambda, R0: in.Turbulence.R0At(lambda)}
	b.Fitting = FittingVariance(in.Optics, in.Turbulence)
	b.Servo, b.Aliasing, b.AliasingNoDelay = bandVariances(in.Optics, in.Turbulence, in.Loop)
	noise, err := NoiseVariance(in.ModalNoise, in.ModalGains, in.Loop, lambda)
	if err != nil {
		return Budget{}, err
	}
	b.Noise = noise
	b.LowOrder = lowOrderVariance(in, b.R0)
	if o := in.Optics; o.Coupling > 0 && math.Abs(o.Pitch/o.Subaperture-1) < 1e-6 {
		lowOrders := 0
		if in.LowOrder != nil {
			lowOrders = completeOrders(len(in.LowOrder) + 1)
		}
		b.BandEdge = bandEdgeVariance(o, in.Turbulence, in.Loop, lowOrders)
		b.LowOrder += b.BandEdge
	}
	b.Total = b.Fitting + b.Aliasing + b.Servo + b.Noise + b.LowOrder
	b.Strehl = math.Exp(-b.Total)
	return b, nil
}

// FittingVariance returns the fitting error in rad² at the science wavelength.
// For an ideal corrector (o.Coupling 0) it is ∫ Φ(f) d²f over the spatial
// frequencies the mirror cannot form, |fx| or |fy| >= 1/(2p) (up to MaxFrequency
// if set). In polar coordinates the radial integral of the von Kármán spectrum
// has the closed form ∫ (f² + f0²)^(−11/6) f df = −(3/5)(f² + f0²)^(−5/6), which
// leaves a one-dimensional integral over the direction. For Kolmogorov turbulence
// it is 0.23 (p/r0)^(5/3): a continuous face-sheet mirror's a_F of 0.23–0.35
// (Hudgin, JOSA 67 (1977) 393, from memory) at the low end, as an ideal mirror.
//
// A mirror of Gaussian influence functions (o.Coupling > 0) adds what its
// least-squares fit leaves in the band and takes back what it fits beyond it
// (mirrorFitExcess).
func FittingVariance(o Optics, t Turbulence) float64 {
	r0 := t.R0At(o.ScienceWavelength)
	f0 := 1 / t.L0
	fc := 1 / (2 * o.Pitch)
	const n = 2048
	s := 0.0
	for i := range n {
		th := (float64(i) + 0.5) / n * math.Pi / 4 // one octant; the square is symmetric
		edge := 1 / math.Cos(th)
		in := math.Pow(fc*fc*edge*edge+f0*f0, -5.0/6)
		if o.MaxFrequency > 0 {
			fm := o.MaxFrequency * edge
			in -= math.Pow(fm*fm+f0*f0, -5.0/6)
		}
		s += in
	}
	ideal := 0.023 * math.Pow(r0, -5.0/3) * 0.6 * s / n * 2 * math.Pi
	if o.Coupling == 0 {
		return ideal
	}
	return ideal + mirrorFitExcess(o, t)
}

// mirrorFitExcess is the least-squares fit of a mirror with the same influence
// function g at every actuator of a square grid of pitch p, against an ideal
// corrector's, in the spatial-frequency domain. By Poisson's summation formula
// a command wave at an in-band f shapes the surface into G(f_k) at every
// f_k = f + k/p, k ∈ ℤ², with G = ĝ/p² (for the separable Gaussian
// c^((x/p)²), per axis G(f) = √(π/a) exp(−π²p²f²/a), a = ln(1/c)); the mirror
// model of Fourier-domain AO simulation (Correia & Teixeira, JOSA A 31 (2014)
// 2763, from memory). The best command C = Σₖ G_k φ_k / Σₖ G_k² leaves
// Σₖ Φ_k − Σₖ G_k² Φ_k / Σₖ G_k², which is the ideal corrector's Σ_{k≠0} Φ_k plus
// Σ_{k≠0} G_k² (Φ_0 − Φ_k) / Σₖ G_k², integrated here over the band (Φ with
// the pupil's piston filter and MaxFrequency, as in bandVariances). On the
// bench's mirrors (coupling 0.15, 4 pupil samples per pitch) it raises the fit
// by 16–20 % on the default and large scenarios, as their best fits measure.
func mirrorFitExcess(o Optics, t Turbulence) float64 {
	phase := spectrum(o, t)
	p := o.Pitch
	g := gaussianTransform(o.Coupling, p)
	fc := 1 / (2 * p)
	fmin := fminD / o.Diameter
	var gx, gy [2*aliasOrders + 1]float64
	s := 0.0
	for i := range bandAngles {
		th := (float64(i) + 0.5) / bandAngles * math.Pi
		c, sn := math.Cos(th), math.Sin(th)
		edge := fc / math.Max(math.Abs(c), math.Abs(sn))
		du := math.Log(edge/fmin) / bandRadii
		for k := range bandRadii {
			f := fmin * math.Exp((float64(k)+0.5)*du)
			fx, fy := f*c, f*sn
			w := f * f * du * math.Pi / bandAngles * 2 // f df dθ, both half-planes
			for m := -aliasOrders; m <= aliasOrders; m++ {
				gx[m+aliasOrders] = g(fx + float64(m)/p)
				gy[m+aliasOrders] = g(fy + float64(m)/p)
			}
			p0 := phase(fx, fy)
			var num, den float64
			for m := -aliasOrders; m <= aliasOrders; m++ {
				for n := -aliasOrders; n <= aliasOrders; n++ {
					gk := gx[m+aliasOrders] * gy[n+aliasOrders]
					den += gk * gk
					if m != 0 || n != 0 {
						num += gk * gk * (p0 - phase(fx+float64(m)/p, fy+float64(n)/p))
					}
				}
			}
			s += w * num / den
		}
	}
	return s
}

// spectrum returns the phase spectrum the budget integrates, in rad² m² at the
// science wavelength: von Kármán with the pupil's piston filter, zero at and
// beyond MaxFrequency on either axis (the simulated screen's square band).
func spectrum(o Optics, t Turbulence) func(fx, fy float64) float64 {
	r0 := t.R0At(o.ScienceWavelength)
	return func(fx, fy float64) float64 {
		if o.MaxFrequency > 0 && (math.Abs(fx) >= o.MaxFrequency || math.Abs(fy) >= o.MaxFrequency) {
			return 0
		}
		f := math.Hypot(fx, fy)
		return PhaseSpectrum(f, r0, t.L0) * pistonFilter(f, o.Diameter)
	}
}

// Integration grid of the corrected band: directions over half the plane (Φ and
// every |transfer|² are even in f) and logarithmic radii from fminD/D to the band's
// edge, where the piston filter has removed all but 1e-6 of the power.
const (
	bandAngles = 96
	bandRadii  = 96
	fminD      = 1e-3
	// aliasOrders is the largest |m| of the aliased frequencies f + (m, n)/d summed;
	// their share falls as |m|^(−11/3), so orders past 5 add under 0.1 %.
	aliasOrders = 5
)

// bandVariances integrates over the corrected band the servo-lag residual
// Σᵢ wᵢ Φ(f) |E(f·vᵢ)|² and the aliasing
// Σᵢ wᵢ Σ_{(m,n)≠0} |R(f)·S(f_mn)|² Φ(f_mn) |H(f_mn·vᵢ)|² P(f), with f_mn = f + (m, n)/d,
// S(f) the Shack–Hartmann's response (shResponse) and R(f) = S(f)/|S(f)|² the least-squares reconstructor
// (Rigaut, Véran & Lai 1998). It returns (servo, aliasing, aliasing of the
// loop with no delay at gain 1, H = 1) in rad².
//
// P(f) = pistonFilter(f, D) is the finite pupil: aliased power reappears as a wave
// at the in-band f, and what a wave of frequency f varies over a circular pupil,
// piston removed, is P(f) of its power (the same filter as Φ's own, Sasiela 1994;
// for f ≪ 1/D it is (πDf)²/4, the variance D²/16 of the tilt that the wave's
// gradient makes across the pupil, Noll 1976). The infinite-pupil model
// leaves it out and, for a sensor whose gradient span s is shorter than its
// subaperture d, diverges: frequencies near (m, n)/d give every subaperture
// nearly the same slope (s < d does not null them), which it reconstructs as a
// tilt of unbounded extent, R(f) ∝ 1/f as f → 0. On the built-in small
// scenario's bench sampling (s = 3d/4, 8 subapertures) that overstated the
// aliasing twice over: 0.124 against 0.062 rad² at gain 0.4.
func bandVariances(o Optics, t Turbulence, l Loop) (servo, aliasing, aliasingNoDelay float64) {
	D, d := o.Diameter, o.Subaperture
	span := o.GradientSpan
	if span == 0 {
		span = d
	}
	phase := spectrum(o, t)
	overBand(1/(2*o.Pitch), D, func(fx, fy, f, w float64) {
		p := phase(fx, fy)
		pf := pistonFilter(f, D)
		sx, sy := shResponse(fx, fy, d, span)
		norm := sx*sx + sy*sy
		for _, layer := range t.Layers {
			vx, vy := layer.WindSpeed*math.Cos(layer.WindDirection), layer.WindSpeed*math.Sin(layer.WindDirection)
			servo += w * layer.Fraction * p * l.RejectionPower(fx*vx+fy*vy)
		}
		if norm == 0 {
			return
		}
		for m := -aliasOrders; m <= aliasOrders; m++ {
			for n := -aliasOrders; n <= aliasOrders; n++ {
				if m == 0 && n == 0 {
					continue
				}
				gx, gy := fx+float64(m)/d, fy+float64(n)/d
				pa := phase(gx, gy)
				if pa == 0 {
					continue
				}
				ax, ay := shResponse(gx, gy, d, span)
				r := (sx*ax + sy*ay) / norm
				a := w * r * r * pa * pf
				aliasingNoDelay += a
				for _, layer := range t.Layers {
					vx, vy := layer.WindSpeed*math.Cos(layer.WindDirection), layer.WindSpeed*math.Sin(layer.WindDirection)
					aliasing += a * layer.Fraction * l.NoisePower(gx*vx+gy*vy)
				}
			}
		}
	})
	return servo, aliasing, aliasingNoDelay
}

// overBand visits the nodes of the log-polar quadrature of the controlled band
// |fx|, |fy| ≤ fc above fminD/D that the servo, aliasing and band-edge terms
// integrate over: each node's (fx, fy), its radius f and its weight
// w = f df dθ, counting both half-planes.
func overBand(fc, D float64, visit func(fx, fy, f, w float64)) {
	fmin := fminD / D
	for i := range bandAngles {
		th := (float64(i) + 0.5) / bandAngles * math.Pi
		c, s := math.Cos(th), math.Sin(th)
		edge := fc / math.Max(math.Abs(c), math.Abs(s))
		du := math.Log(edge/fmin) / bandRadii
		for k := range bandRadii {
			f := fmin * math.Exp((float64(k)+0.5)*du)
			visit(f*c, f*s, f, f*f*du*math.Pi/bandAngles*2)
		}
	}
}

// shResponse returns the x and y slope responses of a d-wide subaperture that
// differences the wavefront across s to a unit phase wave at (fx, fy):
// 2π fx sinc(s fx) sinc(d fy) and 2π fy sinc(d fx) sinc(s fy) (s = d: the mean
// gradient over the square; the common factor j and the sampling phase cancel in
// every ratio used).
func shResponse(fx, fy, d, s float64) (sx, sy float64) {
	return 2 * math.Pi * fx * sinc(s*fx) * sinc(d*fy), 2 * math.Pi * fy * sinc(d*fx) * sinc(s*fy)
}

// sinc is sin(πx)/(πx).
func sinc(x float64) float64 {
	if math.Abs(x) < 1e-8 {
		return 1
	}
	return math.Sin(math.Pi*x) / (math.Pi * x)
}

// NoiseVariance returns the noise term in rad² at wavelength lambda:
// (4π/λ)² Σᵢ ModalNoise[i]·N(g·gᵢ), with N the loop's NoiseGain at mode i's gain
// (the factor 2 of 4π is the reflection: a surface h delays the wavefront by 2h,
// common practice). Nil modalNoise gives 0.
func NoiseVariance(modalNoise, modalGains []float64, l Loop, lambda float64) (float64, error) {
	k := 4 * math.Pi / lambda
	total := 0.0
	cache := map[float64]float64{}
	for i, v := range modalNoise {
		if !(v >= 0) || math.IsInf(v, 0) {
			return 0, fmt.Errorf("analysis: modal noise %d = %g m²: must be finite and >= 0", i, v)
		}
		m := l
		if modalGains != nil {
			m.Gain = l.Gain * modalGains[i]
		}
		if m.Gain == 0 || v == 0 {
			continue
		}
		ng, ok := cache[m.Gain]
		if !ok {
			if !m.Stable() {
				return 0, fmt.Errorf("analysis: mode %d at gain %g is unstable", i, m.Gain)
			}
			ng = m.NoiseGain()
			cache[m.Gain] = ng
		}
		total += k * k * v * ng
	}
	return total, nil
}

// lowOrderVariance is the LowOrder term of in for r0 at the science wavelength.
func lowOrderVariance(in BudgetInput, r0 float64) float64 {
	g, l := in.Loop.Gain, in.Loop.Leak
	share := g / (g + l)
	leak := l / (g + l)
	v := 0.0
	for m, k := range in.LowOrder {
		n, _ := optics.NollIndex(m + 2)
		e := 1 - k*share
		v += ZernikeVariance(n, in.Optics.Diameter, r0, in.Turbulence.L0, 0, 0) * (e*e - leak*leak)
	}
	return math.Max(v, 0)
}

// completeOrders returns the highest radial order n whose Noll modes all lie in
// 2 … j.
func completeOrders(j int) int {
	n, _ := optics.NollIndex(j)
	if j < (n+1)*(n+2)/2 {
		n--
	}
	return n
}
