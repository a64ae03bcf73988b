// Package detector renders the raw frames of a Shack–Hartmann detector: one
// spot per valid subaperture on a square window of pixels, with photon and
// read noise, background, bias, dark current, a fixed flat-field pattern and
// saturation at full well, read out as 16-bit analogue-to-digital units (ADU).
//
// Geometry. The frame is a square of (Subapertures·Pixels)² pixels stored row
// by row (row-major, x fastest), the subaperture at grid row r and column c
// owning the Pixels×Pixels window whose first pixel is (r·Pixels, c·Pixels).
// Pixel coordinates of a window run from 0 to Pixels−1; the window's centre is
// at (Pixels−1)/2 in both axes, where a spot with zero offset sits.
//
// Spots. Each spot is a Gaussian of rms width Sigma pixels (a seeing-limited
// spot, or the common-practice Gaussian stand-in for a diffraction-limited one
// with FWHM ≈ λ/d, σ = FWHM/2.3548), integrated over each pixel with the error
// function. Each subaperture may also be given an elongation (Elongation, a
// length and a direction): the spot is then the Gaussian convolved with a
// uniform line of that length (the full extent of the elongation, in pixels)
// along the direction (radians from the +x axis towards +y), which is the
// shape of a laser beacon's spot seen through an off-axis subaperture to first
// order. Elongation defaults to zero for every subaperture.
//
// Render allocates nothing: every buffer is made by New. The package is pure
// physics: no gRPC, clocks or scenario files.
package detector

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
)

// ErrConfig is wrapped by every refusal of a Config or of Render's arguments.
var ErrConfig = errors.New("detector: bad configuration")

// Config describes the detector and its spots.
type Config struct {
	// Subapertures across the grid (>= 1).
	Subapertures int
	// Valid lists the valid subapertures as r·Subapertures+c, in slope order
	// (non-empty, each in [0, Subapertures²), no repeats).
	Valid []int
	// Pixels across each subaperture window (2..64).
	Pixels int
	// Sigma is the spot's rms width in pixels (0.2..Pixels).
	Sigma float64
	// Photons is the number of detected photo-electrons from the star per
	// subaperture per frame (>= 0), before the flat field.
	Photons float64
	// Background in electrons per pixel per frame (>= 0).
	Background float64
	// Dark current in electrons per pixel per frame (>= 0).
	Dark float64
	// ReadNoise in electrons rms per pixel (>= 0).
	ReadNoise float64
	// Bias in ADU added to every pixel (0..65535).
	Bias float64
	// Gain in electrons per ADU (> 0).
	Gain float64
	// FullWell in electrons (> 0): a pixel's electrons are clipped there.
	FullWell float64
	// FlatRMS is the rms of the fixed pixel-to-pixel response pattern, a
	// fraction in [0, 0.5); the pattern is drawn once from FlatSeed.
	FlatRMS float64
	// FlatSeed seeds the flat-field pattern.
	FlatSeed uint64
	// PhotonNoise draws Poisson noise on the star, background and dark
	// electrons; false renders their expected values (read noise still applies).
	PhotonNoise bool
}

// Elongation of one subaperture's spot: the full Length in pixels (>= 0) of a
// uniform line convolved with the Gaussian, along Angle radians from +x to +y.
type Elongation struct {
	Length, Angle float64
}

// Detector renders frames for one Config. Not safe for concurrent use.
type Detector struct {
	cfg      Config
	side     int       // pixels across the frame
	flat     []float64 // per-pixel response, mean 1
	expect   []float64 // expected electrons of one window (scratch)
	elong    []Elongation
	validSet []bool
}

const maxSub = 33 // sub-samples along an elongated spot

// New validates cfg and makes every buffer.
func New(cfg Config) (*Detector, error) {
	if err := cfg.validate(); err != nil {
		return nil, err
	}
	side := cfg.Subapertures * cfg.Pixels
	d := &Detector{cfg: cfg, side: side, flat: make([]float64, side*side),
		expect: make([]float64, cfg.Pixels*cfg.Pixels), elong: make([]Elongation, len(cfg.Valid)),
		validSet: make([]bool, cfg.Subapertures*cfg.Subapertures)}
	cfg.Valid = append([]int(nil), cfg.Valid...)
	d.cfg = cfg
	for _, v := range cfg.Valid {
		d.validSet[v] = true
	}
	rng := rand.New(rand.NewPCG(cfg.FlatSeed, 0x666c6174))
	for i := range d.flat {
		f := 1 + cfg.FlatRMS*rng.NormFloat64()
		d.flat[i] = math.Max(f, 0.05)
	}
	return d, nil
}

func (c Config) validate() error {
	bad := func(field, rng string, v any) error {
		return fmt.Errorf("%w: %s = %v, want %s", ErrConfig, field, v, rng)
	}
	finite := func(x float64) bool { return !math.IsNaN(x) && !math.IsInf(x, 0) }
	switch {
	case c.Subapertures < 1:
		return bad("Subapertures", ">= 1", c.Subapertures)
	case c.Pixels < 2 || c.Pixels > 64:
		return bad("Pixels", "2..64", c.Pixels)
	case !finite(c.Sigma) || c.Sigma < 0.2 || c.Sigma > float64(c.Pixels):
		return bad("Sigma", fmt.Sprintf("0.2..%d pixels", c.Pixels), c.Sigma)
	case !finite(c.Photons) || c.Photons < 0:
		return bad("Photons", ">= 0", c.Photons)
	case !finite(c.Background) || c.Background < 0:
		return bad("Background", ">= 0", c.Background)
	case !finite(c.Dark) || c.Dark < 0:
		return bad("Dark", ">= 0", c.Dark)
	case !finite(c.ReadNoise) || c.ReadNoise < 0:
		return bad("ReadNoise", ">= 0", c.ReadNoise)
	case !finite(c.Bias) || c.Bias < 0 || c.Bias > 65535:
		return bad("Bias", "0..65535 ADU", c.Bias)
	case !finite(c.Gain) || c.Gain <= 0:
		return bad("Gain", "> 0 electrons per ADU", c.Gain)
	case !finite(c.FullWell) || c.FullWell <= 0:
		return bad("FullWell", "> 0 electrons", c.FullWell)
	case !finite(c.FlatRMS) || c.FlatRMS < 0 || c.FlatRMS >= 0.5:
		return bad("FlatRMS", "[0, 0.5)", c.FlatRMS)
	case len(c.Valid) == 0:
		return bad("Valid", "at least one subaperture", "none")
	}
	seen := make(map[int]bool, len(c.Valid))
	for i, v := range c.Valid {
		if v < 0 || v >= c.Subapertures*c.Subapertures {
			return bad(fmt.Sprintf("Valid[%d]", i), fmt.Sprintf("[0, %d)", c.Subapertures*c.Subapertures), v)
		}
		if seen[v] {
			return bad(fmt.Sprintf("Valid[%d]", i), "no repeat", v)
		}
		seen[v] = true
	}
	return nil
}

// Side is the number of pixels across the frame; a frame holds Side² pixels.
func (d *Detector) Side() int { return d.side }

// Config returns the detector's configuration.
func (d *Detector) Config() Config { return d.cfg }

// Flat returns the fixed per-pixel response pattern (read-only, mean about 1).
func (d *Detector) Flat() []float64 { return d.flat }

// SetElongation sets the spot elongation of every valid subaperture, in slope
// order (len(e) == len(Valid)); nil resets all to zero. Lengths must be finite,
// in [0, 4·Pixels].
func (d *Detector) SetElongation(e []Elongation) error {
	if e == nil {
		clear(d.elong)
		return nil
	}
	if len(e) != len(d.elong) {
		return fmt.Errorf("%w: %d elongations, want %d (one per valid subaperture)", ErrConfig, len(e), len(d.elong))
	}
	for i, x := range e {
		if math.IsNaN(x.Length) || x.Length < 0 || x.Length > 4*float64(d.cfg.Pixels) || math.IsNaN(x.Angle) || math.IsInf(x.Angle, 0) {
			return fmt.Errorf("%w: elongation %d = {%v, %v}, want length in [0, %d] pixels and a finite angle",
				ErrConfig, i, x.Length, x.Angle, 4*d.cfg.Pixels)
		}
	}
	copy(d.elong, e)
	return nil
}

// Render writes one frame into dst (len Side²) with the spot of valid
// subaperture i offset by (offsets[2i], offsets[2i+1]) pixels from its
// window's centre (x then y per subaperture, as the bench orders slopes), drawing
// noise from rng. Pixels of invalid subapertures get background, dark and bias
// only. It allocates nothing.
func (d *Detector) Render(dst []uint16, offsets []float64, rng *rand.Rand) error {
	nv := len(d.cfg.Valid)
	if len(dst) != d.side*d.side {
		return fmt.Errorf("%w: frame of %d pixels, want %d", ErrConfig, len(dst), d.side*d.side)
	}
	if len(offsets) != 2*nv {
		return fmt.Errorf("%w: %d offsets, want %d", ErrConfig, len(offsets), 2*nv)
	}
	p := d.cfg.Pixels
	n := d.cfg.Subapertures
	k := 0
	for s := 0; s < n*n; s++ {
		if d.validSet[s] {
			d.spot(offsets[2*k], offsets[2*k+1], d.elong[k])
			k++
		} else {
			clear(d.expect)
		}
		r0, c0 := (s/n)*p, (s%n)*p
		for y := 0; y < p; y++ {
			row := (r0+y)*d.side + c0
			for x := 0; x < p; x++ {
				dst[row+x] = d.pixel(d.expect[y*p+x], d.flat[row+x], rng)
			}
		}
	}
	return nil
}

// pixel turns expected star electrons into a read-out value.
func (d *Detector) pixel(star, flat float64, rng *rand.Rand) uint16 {
	c := &d.cfg
	mean := flat*(star+c.Background) + c.Dark
	e := mean
	if c.PhotonNoise {
		e = poisson(mean, rng)
	}
	if e > c.FullWell {
		e = c.FullWell
	}
	if c.ReadNoise > 0 {
		e += c.ReadNoise * rng.NormFloat64()
	}
	adu := math.Round(c.Bias + e/c.Gain)
	switch {
	case adu < 0:
		return 0
	case adu > 65535:
		return 65535
	}
	return uint16(adu)
}

// spot writes the expected star electrons of one window into d.expect.
func (d *Detector) spot(ox, oy float64, el Elongation) {
	p := d.cfg.Pixels
	clear(d.expect)
	c := float64(p-1) / 2
	m := 1
	if el.Length > 0 {
		m = min(maxSub, 1+2*int(math.Ceil(el.Length/(d.cfg.Sigma))))
	}
	w := d.cfg.Photons / float64(m)
	ux, uy := math.Cos(el.Angle), math.Sin(el.Angle)
	for j := 0; j < m; j++ {
		t := el.Length * ((float64(j)+0.5)/float64(m) - 0.5)
		cx, cy := c+ox+t*ux, c+oy+t*uy
		for y := 0; y < p; y++ {
			fy := gaussBin(float64(y), cy, d.cfg.Sigma)
			if fy == 0 {
				continue
			}
			for x := 0; x < p; x++ {
				d.expect[y*p+x] += w * fy * gaussBin(float64(x), cx, d.cfg.Sigma)
			}
		}
	}
}

// gaussBin is the fraction of a unit Gaussian (centre mu, rms s) falling in
// the pixel [i−½, i+½].
func gaussBin(i, mu, s float64) float64 {
	k := 1 / (math.Sqrt2 * s)
	return 0.5 * (math.Erf((i+0.5-mu)*k) - math.Erf((i-0.5-mu)*k))
}

// poisson draws a Poisson deviate of mean lambda without allocating: Knuth's
// product method below 30, the normal approximation above, left unrounded so
// that its variance is exactly lambda (Knuth 1997, The Art of Computer
// Programming vol. 2, §3.4.1; the normal limit is common practice for means of
// tens and more).
func poisson(lambda float64, rng *rand.Rand) float64 {
	if lambda <= 0 {
		return 0
	}
	if lambda < 30 {
		l := math.Exp(-lambda)
		k := 0.0
		prod := rng.Float64()
		for prod > l {
			k++
			prod *= rng.Float64()
		}
		return k
	}
	return math.Max(lambda+math.Sqrt(lambda)*rng.NormFloat64(), 0)
}
