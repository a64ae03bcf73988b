package wfs

import (
	"fmt"
	"math"
	"math/rand/v2"

	"gonum.org/v1/gonum/stat/distuv"
)

// QuadCellConfig describes a four-quadrant tilt sensor on a natural star.
type QuadCellConfig struct {
	// SpotSigma is the rms width of the Gaussian spot on the sky, each axis,
	// radians (> 0).
	SpotSigma float64
	// Photons is the mean number of photo-electrons detected per frame in the
	// whole spot (> 0).
	Photons float64
	// ReadNoise is the read noise per quadrant, electrons rms (>= 0).
	ReadNoise float64
}

// QuadCell is a quad-cell tilt sensor: a Gaussian spot of rms width σ falls on
// four quadrants, whose photo-electron counts (Poisson, plus Gaussian read
// noise) give the tilt estimate
//
//	x̂ = σ·√(π/2) · ((A+D) − (B+C)) / (A+B+C+D)
//
// (A, D right of the centre; B, C left; likewise for y). The factor σ·√(π/2)
// makes the response unit-slope at the null: the fraction of a Gaussian right
// of the centre minus the fraction left of it is erf(x/(σ√2)) ≈ x·√(2/π)/σ.
// A quad cell is linear only for |x| ≪ σ, which is why it is used in closed
// loop, near its null.
//
// Sense allocates nothing.
type QuadCell struct {
	cfg     QuadCellConfig
	gain    float64
	poisson distuv.Poisson
	trans   float64 // sky transmission, SetTransmission
	sum     float64 // detected sum of the last Sense
}

// NewQuadCell checks c and returns the sensor. Each refusal names the field
// and its allowed range.
func NewQuadCell(c QuadCellConfig) (*QuadCell, error) {
	switch {
	case !(c.SpotSigma > 0) || math.IsInf(c.SpotSigma, 0):
		return nil, fmt.Errorf("wfs: quad cell spot sigma %g rad: must be finite and > 0", c.SpotSigma)
	case !(c.Photons > 0) || math.IsInf(c.Photons, 0):
		return nil, fmt.Errorf("wfs: quad cell photons %g e-: must be finite and > 0", c.Photons)
	case !(c.ReadNoise >= 0) || math.IsInf(c.ReadNoise, 0):
		return nil, fmt.Errorf("wfs: quad cell read noise %g e-: must be finite and >= 0", c.ReadNoise)
	}
	return &QuadCell{cfg: c, gain: c.SpotSigma * math.Sqrt(math.Pi/2), trans: 1}, nil
}

// SetTransmission dims the star to the fraction t of Photons from the next
// Sense on (a cloud; t in [0, 1], clamped there; 1 is a clear sky). NoiseRMS
// stays the clear sky's.
func (q *QuadCell) SetTransmission(t float64) {
	if !(t > 0) {
		t = 0
	}
	q.trans = min(t, 1)
}

// Flux returns the photo-electrons the last Sense detected over the four
// quadrants (with its noise; read noise included), as the sensor's own sum
// gives it.
func (q *QuadCell) Flux() float64 { return q.sum }

// NoiseRMS is the tilt-estimate noise at the null, radians rms per axis:
//
//	σ_x = σ·√(π/2) · √(N + 4·σ_r²) / N
//
// for N photo-electrons and read noise σ_r per quadrant: at the null each
// photon adds ±1 to the difference of halves (variance N) and each of the four
// quadrants adds σ_r² of read noise; dividing by the sum N and multiplying by
// the gain σ√(π/2) gives σ_x, to first order in 1/SNR. This is the Gaussian-spot form of the handbook
// result that quad-cell noise is the spot's angular size over the
// signal-to-noise ratio, times a shape factor (Tyson, Principles of Adaptive
// Optics, quad-cell tracking error, (3π/16)·(λ/D)/SNR for a diffraction-limited
// spot; Hardy 1998, Adaptive Optics for Astronomical Telescopes, §5 — both
// *from memory*).
func (q *QuadCell) NoiseRMS() float64 {
	n := q.cfg.Photons
	return q.gain * math.Sqrt(n+4*q.cfg.ReadNoise*q.cfg.ReadNoise) / n
}

// Sense returns the quad cell's estimate of the tilt (tx, ty), radians, with
// photon and read noise drawn from rng; a nil rng gives the noiseless
// (nonlinear) response. A frame with no net signal reads as zero.
func (q *QuadCell) Sense(tx, ty float64, rng *rand.Rand) (sx, sy float64) {
	// Fraction of the spot right of the centre (x > 0) and above it (y > 0).
	s2 := q.cfg.SpotSigma * math.Sqrt2
	px := 0.5 * math.Erfc(-tx/s2)
	py := 0.5 * math.Erfc(-ty/s2)
	n := q.cfg.Photons * q.trans
	a := n * px * py             // right, top
	b := n * (1 - px) * py       // left, top
	c := n * (1 - px) * (1 - py) // left, bottom
	d := n * px * (1 - py)       // right, bottom
	if rng != nil {
		q.poisson.Src = rng
		a = q.count(a, rng)
		b = q.count(b, rng)
		c = q.count(c, rng)
		d = q.count(d, rng)
	}
	sum := a + b + c + d
	q.sum = sum
	if !(sum > 0) {
		return 0, 0
	}
	return q.gain * ((a + d) - (b + c)) / sum, q.gain * ((a + b) - (c + d)) / sum
}

func (q *QuadCell) count(mean float64, rng *rand.Rand) float64 {
	e := 0.0
	if mean > 0 {
		q.poisson.Lambda = mean
		e = q.poisson.Rand()
	}
	return e + q.cfg.ReadNoise*rng.NormFloat64()
}
