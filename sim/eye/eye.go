// Package eye is the aberration source of a human eye for the bench: a static
// wavefront drawn as Zernike coefficients from the published statistics of a
// population of normal eyes, and a defocus that fluctuates with the small,
// continual fluctuations of accommodation.
//
// The population is Thibos, Hong, Bradley & Cheng (2002), "Statistical
// variation of aberration structure and image quality in a normal population
// of healthy eyes", JOSA A 19, 2329: 200 eyes, 6 mm pupil. The means and
// standard deviations in Population are from memory and rounded; the study
// also reports correlations between terms, which this model leaves out (each
// coefficient is drawn independently from a normal distribution).
//
// The fluctuation of accommodation follows Charman & Heron (1988),
// "Fluctuations in accommodation: a review", Ophthalmic Physiol. Opt. 8, 153:
// about 0.1 D rms with a high-frequency component near 1–2 Hz (values from
// memory; the band is common practice). It is a second-order autoregressive
// process, a resonator whose spectrum peaks in the configured band.
//
// This is a simulator. Any real retinal imaging puts light into a person's
// eye: exposure limits follow ANSI Z136.1 and ISO 15004-2, the scenario's
// exposure check is indicative only, and local medical-device and ethics
// rules and licensed practice govern any real use.
package eye

import (
	"fmt"
	"math"
	"math/rand/v2"

	"stillsky/sim/optics"
)

// Term is the population statistics of one Zernike coefficient (Noll index,
// OSA/ANSI Z80.28 normalisation: unit rms over the pupil), in micrometres of
// wavefront over a 6 mm pupil.
type Term struct {
	Noll      int
	Name      string
	Mean, Std float64 // µm
}

// Population is the table of Thibos et al. (2002), second to fourth radial
// order, values from memory, rounded. Defocus (Noll 4) is the spread of the
// refractive state about emmetropia of an uncorrected population, a spread of
// about ±0.5 D (1 D is 1.30 µm of Zernike defocus over 6 mm); with
// astigmatism it dominates, as the study found. Noll's sign convention of
// sin/cos terms differs from the OSA one; with independent draws of
// near-zero-mean terms that matters only for the means of Noll 5 and 6.
var Population = []Term{
	{Noll: 4, Name: "defocus", Mean: 0, Std: 0.65},
	{Noll: 5, Name: "oblique astigmatism", Mean: -0.02, Std: 0.17},
	{Noll: 6, Name: "vertical astigmatism", Mean: 0.08, Std: 0.26},
	{Noll: 7, Name: "vertical coma", Mean: -0.02, Std: 0.14},
	{Noll: 8, Name: "horizontal coma", Mean: 0.01, Std: 0.11},
	{Noll: 9, Name: "vertical trefoil", Mean: -0.03, Std: 0.10},
	{Noll: 10, Name: "oblique trefoil", Mean: 0.01, Std: 0.08},
	{Noll: 11, Name: "spherical aberration", Mean: 0.128, Std: 0.096},
	{Noll: 12, Name: "secondary astigmatism", Mean: 0, Std: 0.04},
	{Noll: 13, Name: "secondary astigmatism", Mean: 0, Std: 0.04},
	{Noll: 14, Name: "quadrafoil", Mean: 0, Std: 0.04},
	{Noll: 15, Name: "quadrafoil", Mean: 0, Std: 0.04},
}

// DefocusPerDioptre returns the Zernike defocus coefficient in metres of one
// dioptre over a pupil of the given diameter: c = D·R²/(4√3) with R the pupil
// radius (Thibos et al. 2002's relation between M and c(2,0)).
func DefocusPerDioptre(diameter float64) float64 {
	r := diameter / 2
	return r * r / (4 * math.Sqrt(3))
}

// Draw returns one eye's coefficients in metres, in the order of Population,
// from the random stream rng.
func Draw(rng *rand.Rand) []float64 {
	c := make([]float64, len(Population))
	for i, t := range Population {
		c[i] = (t.Mean + t.Std*rng.NormFloat64()) * 1e-6
	}
	return c
}

// Config is an eye for the bench.
type Config struct {
	// Seed draws the eye and its fluctuation.
	Seed int64
	// AccommodationRMS is the rms of the fluctuation in dioptres.
	AccommodationRMS float64
	// Low and High bound the fluctuation's band in hertz, 0 < Low < High.
	Low, High float64
	// Step is the time step of the fluctuation in seconds (the frame period);
	// High must be below the Nyquist frequency 1/(2 Step).
	Step float64
}

// Eye is a static wavefront plus a fluctuating defocus on the pupil grid.
// Advance and OPD allocate nothing. An Eye is not safe for concurrent use.
type Eye struct {
	coef    []float64 // metres, order of Population
	static  []float64 // OPD of the drawn coefficients
	defocus []float64 // unit-rms Noll 4 on the grid
	// AR(2) resonator x[n] = a1 x[n-1] + a2 x[n-2] + σ e[n], in metres of defocus.
	a1, a2, sigma, x1, x2 float64
	step, pending         float64
	rng                   *rand.Rand
}

// New draws an eye for pupil p (whose Diameter must be the study's 6 mm; see
// scenario.EyePupil) and starts its fluctuation.
func New(c Config, p *optics.Pupil) (*Eye, error) {
	switch {
	case !(c.Step > 0):
		return nil, fmt.Errorf("eye: step %g s: must be > 0", c.Step)
	case !(c.Low > 0) || !(c.Low < c.High):
		return nil, fmt.Errorf("eye: band [%g, %g] Hz: must have 0 < low < high", c.Low, c.High)
	case !(c.High < 0.5/c.Step):
		return nil, fmt.Errorf("eye: band high %g Hz: must be below the Nyquist frequency %g Hz of the frame rate", c.High, 0.5/c.Step)
	case !(c.AccommodationRMS >= 0):
		return nil, fmt.Errorf("eye: accommodation rms %g D: must be >= 0", c.AccommodationRMS)
	}
	rng := rand.New(rand.NewPCG(uint64(c.Seed), 0xe7e))
	n := p.N * p.N
	e := &Eye{coef: Draw(rng), static: make([]float64, n), defocus: make([]float64, n), step: c.Step, rng: rng}
	z := make([]float64, n)
	for i, t := range Population {
		if err := optics.Zernike(t.Noll, p, z); err != nil {
			return nil, fmt.Errorf("eye: %w", err)
		}
		for k, v := range z {
			e.static[k] += e.coef[i] * v * p.Mask[k]
		}
		if t.Noll == 4 {
			for k, v := range z {
				e.defocus[k] = v * p.Mask[k]
			}
		}
	}
	// Resonator at the band's centre with a pole radius that sets its
	// half-power width to the band: r = exp(−π B Δt).
	f0, bw := (c.Low+c.High)/2, c.High-c.Low
	r := math.Exp(-math.Pi * bw * c.Step)
	e.a1, e.a2 = 2*r*math.Cos(2*math.Pi*f0*c.Step), -r*r
	// Stationary variance of AR(2) (Box & Jenkins): σx² = σe² (1−a2)/((1+a2)((1−a2)²−a1²)).
	v := (1 - e.a2) / ((1 + e.a2) * ((1-e.a2)*(1-e.a2) - e.a1*e.a1))
	target := c.AccommodationRMS * DefocusPerDioptre(p.Diameter)
	e.sigma = target / math.Sqrt(v)
	// Start in the stationary state: run the resonator through its transient.
	for range int(20 / (bw * c.Step)) {
		e.tick()
	}
	return e, nil
}

func (e *Eye) tick() {
	x := e.a1*e.x1 + e.a2*e.x2 + e.sigma*e.rng.NormFloat64()
	e.x2, e.x1 = e.x1, x
}

// Coefficients returns the eye's drawn Zernike coefficients in metres, in the
// order of Population. The slice is the eye's own.
func (e *Eye) Coefficients() []float64 { return e.coef }

// Fluctuation returns the current defocus fluctuation in metres of Zernike
// defocus.
func (e *Eye) Fluctuation() float64 { return e.x1 }

// Advance moves the fluctuation on by dt seconds, in whole steps.
func (e *Eye) Advance(dt float64) {
	e.pending += dt
	for e.pending >= e.step*(1-1e-9) {
		e.pending -= e.step
		e.tick()
	}
}

// OPD writes the eye's wavefront (metres, zero outside the pupil) into out,
// of length N*N.
func (e *Eye) OPD(out []float64) {
	x := e.x1
	for i, s := range e.static {
		out[i] = s + x*e.defocus[i]
	}
}
