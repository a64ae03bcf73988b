package optics

import (
	"fmt"
	"math"
)

// PupilConfig describes a telescope pupil sampled on a square grid.
type PupilConfig struct {
	// Diameter of the primary aperture in metres (> 0).
	Diameter float64
	// Obstruction is the central obstruction diameter as a fraction of Diameter, in [0, 1).
	Obstruction float64
	// Spiders is the number of radial support vanes (0 for none), evenly spaced
	// starting along +x.
	Spiders int
	// SpiderWidth is the width of each vane in metres (>= 0).
	SpiderWidth float64
	// N is the number of samples across the diameter (>= 4).
	N int
}

// Pupil is a sampled aperture. The grid is N×N samples covering a square of side
// Diameter centred on the optical axis; sample (ix, iy), stored at index iy*N+ix,
// has its centre at x = (ix+0.5)·Scale − Diameter/2, y = (iy+0.5)·Scale − Diameter/2.
// All wavefront maps on this grid (optical path difference in metres, phase in
// radians) use the same layout.
type Pupil struct {
	PupilConfig
	// Scale is the sample spacing in metres: Diameter / N.
	Scale float64
	// Mask is 1 inside the clear aperture and 0 outside; length N*N.
	Mask []float64
	// Area is the clear area in samples (the sum of Mask).
	Area float64
}

// NewPupil samples the aperture described by c. It returns an error naming the
// first field that is out of range.
func NewPupil(c PupilConfig) (*Pupil, error) {
	switch {
	case !(c.Diameter > 0) || math.IsInf(c.Diameter, 0):
		return nil, fmt.Errorf("optics: pupil diameter %g m: must be a finite positive number", c.Diameter)
	case !(c.Obstruction >= 0 && c.Obstruction < 1):
		return nil, fmt.Errorf("optics: pupil obstruction %g: must be in [0, 1)", c.Obstruction)
	case c.Spiders < 0:
		return nil, fmt.Errorf("optics: pupil spiders %d: must be >= 0", c.Spiders)
	case !(c.SpiderWidth >= 0) || c.SpiderWidth >= c.Diameter:
		return nil, fmt.Errorf("optics: pupil spider width %g m: must be in [0, diameter)", c.SpiderWidth)
	case c.N < 4:
		return nil, fmt.Errorf("optics: pupil sampling %d: must be >= 4 samples across", c.N)
	}
	p := &Pupil{PupilConfig: c, Scale: c.Diameter / float64(c.N), Mask: make([]float64, c.N*c.N)}
	r := c.Diameter / 2
	ro := c.Obstruction * r
	for iy := 0; iy < c.N; iy++ {
		y := p.Coord(iy)
		for ix := 0; ix < c.N; ix++ {
			x := p.Coord(ix)
			rr := math.Hypot(x, y)
			if rr > r || rr < ro || p.underSpider(x, y) {
				continue
			}
			p.Mask[iy*c.N+ix] = 1
			p.Area++
		}
	}
	return p, nil
}

// Coord returns the coordinate in metres of the centre of sample column (or row) i.
func (p *Pupil) Coord(i int) float64 {
	return (float64(i)+0.5)*p.Scale - p.Diameter/2
}

func (p *Pupil) underSpider(x, y float64) bool {
	for k := 0; k < p.Spiders; k++ {
		a := 2 * math.Pi * float64(k) / float64(p.Spiders)
		c, s := math.Cos(a), math.Sin(a)
		along := x*c + y*s
		across := -x*s + y*c
		if along >= 0 && math.Abs(across) <= p.SpiderWidth/2 {
			return true
		}
	}
	return false
}
