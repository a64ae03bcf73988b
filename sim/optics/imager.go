package optics

import (
	"fmt"
	"math"
)

// Imager forms the point-spread function of the pupil at one wavelength by a
// zero-padded FFT (Fraunhofer diffraction): PSF ∝ |FT{A exp(2πi·OPD/λ)}|², with A the
// pupil mask. Its buffers are allocated once; it is not safe for concurrent use.
type Imager struct {
	p          *Pupil
	wavelength float64
	m          int // padded grid size, pad·N
	fft        *FFT2
	field      []complex128
	inside     []int32 // indices of the clear samples
	peak       float64 // diffraction-limited peak, (Σ A)²
}

// NewImager returns an imager for pupil p at wavelength (metres) with a padded grid
// of pad·N samples; pad 2 samples the PSF at Nyquist. The PSF pixel is
// wavelength/(pad·Diameter) radians.
func NewImager(p *Pupil, wavelength float64, pad int) (*Imager, error) {
	if !(wavelength > 0) || math.IsInf(wavelength, 0) {
		return nil, fmt.Errorf("optics: imager wavelength %g m: must be a finite positive number", wavelength)
	}
	if pad < 1 || pad > 16 {
		return nil, fmt.Errorf("optics: imager padding %d: must be in [1, 16]", pad)
	}
	if p.Area == 0 {
		return nil, fmt.Errorf("optics: imager: pupil has no clear sample")
	}
	m := pad * p.N
	fft, err := NewFFT2(m)
	if err != nil {
		return nil, err
	}
	im := &Imager{p: p, wavelength: wavelength, m: m, fft: fft, field: make([]complex128, m*m)}
	for i, a := range p.Mask {
		if a != 0 {
			im.inside = append(im.inside, int32(i))
		}
	}
	// At zero frequency every clear sample adds in phase: the peak of the
	// unaberrated PSF of a 0/1 pupil is (number of clear samples)².
	im.peak = p.Area * p.Area
	return im, nil
}

// Size returns the side of the PSF grid in pixels (pad·N).
func (im *Imager) Size() int { return im.m }

// PixelScale returns the PSF pixel in radians on the sky, λ/(pad·D).
func (im *Imager) PixelScale() float64 {
	return im.wavelength / (float64(im.m) * im.p.Scale)
}

// transform fills the padded field from opd (metres, length N*N) and transforms it.
func (im *Imager) transform(opd []float64) {
	n := im.p.N
	if len(opd) != n*n {
		panic(fmt.Sprintf("optics: imager OPD length %d, want %d", len(opd), n*n))
	}
	clear(im.field)
	k := 2 * math.Pi / im.wavelength
	for _, i := range im.inside {
		s, c := math.Sincos(k * opd[i])
		iy, ix := int(i)/n, int(i)%n
		im.field[iy*im.m+ix] = complex(c, s)
	}
	im.fft.Transform(im.field, n)
}

// PSF writes the point-spread function of the wavefront opd (metres, length N*N)
// into out (length Size()²), normalised so that the diffraction-limited peak of the
// same pupil is 1, with zero spatial frequency at pixel (Size/2, Size/2).
func (im *Imager) PSF(opd []float64, out []float64) {
	if len(out) != im.m*im.m {
		panic(fmt.Sprintf("optics: imager PSF length %d, want %d", len(out), im.m*im.m))
	}
	im.transform(opd)
	m, h := im.m, im.m/2
	inv := 1 / im.peak
	for ky := 0; ky < m; ky++ {
		oy := (ky + h) % m
		for kx := 0; kx < m; kx++ {
			v := im.field[ky*m+kx]
			out[oy*m+(kx+h)%m] = (real(v)*real(v) + imag(v)*imag(v)) * inv
		}
	}
}

// Strehl returns the Strehl ratio of the wavefront opd (metres, length N*N): the
// brightest PSF pixel over the diffraction-limited peak of the same pupil.
func (im *Imager) Strehl(opd []float64) float64 {
	im.transform(opd)
	best := 0.0
	for _, v := range im.field {
		if e := real(v)*real(v) + imag(v)*imag(v); e > best {
			best = e
		}
	}
	return best / im.peak
}

// ResidualRMS returns the rms of opd over the clear samples of p after removing its
// mean (piston), in the units of opd: sqrt(⟨(w − ⟨w⟩)²⟩) over the mask.
func ResidualRMS(p *Pupil, opd []float64) float64 {
	if p.Area == 0 {
		return 0
	}
	var s float64
	for i, a := range p.Mask {
		if a != 0 {
			s += opd[i]
		}
	}
	mean := s / p.Area
	var s2 float64
	for i, a := range p.Mask {
		if a != 0 {
			d := opd[i] - mean
			s2 += d * d
		}
	}
	return math.Sqrt(s2 / p.Area)
}
