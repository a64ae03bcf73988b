package dm

import (
	"fmt"
	"math"

	"stillsky/sim/optics"
)

// Cutoff is the relative influence below which nothing is stored. The Gaussian
// is separable, f(x, y) = g(x)·g(y), and each 1-D factor g is truncated where it
// falls below 1e-4 (2.2 pitches for a coupling of 0.15): every part of the
// influence with f >= 1e-4 is kept, and nothing where g(x) or g(y) < 1e-4.
const Cutoff = 1e-4

// Config describes the mirror.
type Config struct {
	// Actuators across the mirror (>= 2); Fried geometry over N subapertures
	// has N+1. The outer rows sit on the pupil edge, so pitch = D/(Actuators−1).
	Actuators int
	// Coupling is the influence function's value at a neighbouring actuator, in (0, 1).
	Coupling float64
	// Stroke is the largest surface displacement in metres (> 0); commands are
	// clipped to ±Stroke.
	Stroke float64
	// Margin in pitches beyond the pupil radius within which actuators are
	// valid (>= 0).
	Margin float64
}

// Mirror is a deformable mirror bound to one pupil grid. It is not safe for
// concurrent use: Surface reuses internal buffers.
type Mirror struct {
	cfg       Config
	pupil     *optics.Pupil
	pitch     float64
	positions [][2]float64
	grid      []int // per valid actuator: index iy·A+ix on the actuator grid
	// Banded 1-D influence: sample i is reached by actuators first[i] ...
	// first[i]+width−1 with weights band[i·width+j] (zero-padded).
	first []int
	band  []float64
	width int
	// Scratch: the clipped command on the actuator grid (A×A) and the
	// command convolved along x (A rows × N samples).
	act, rows []float64
}

// New places the actuators over pupil p and precomputes their truncated
// influence functions. It returns an error naming the first bad field.
func New(p *optics.Pupil, c Config) (*Mirror, error) {
	switch {
	case p == nil:
		return nil, fmt.Errorf("dm: nil pupil")
	case c.Actuators < 2:
		return nil, fmt.Errorf("dm: actuators %d: must be >= 2", c.Actuators)
	case !(c.Coupling > 0 && c.Coupling < 1):
		return nil, fmt.Errorf("dm: coupling %g: must be in (0, 1)", c.Coupling)
	case !(c.Stroke > 0) || math.IsInf(c.Stroke, 0):
		return nil, fmt.Errorf("dm: stroke %g m: must be a finite positive number", c.Stroke)
	case !(c.Margin >= 0) || math.IsInf(c.Margin, 0):
		return nil, fmt.Errorf("dm: margin %g pitches: must be >= 0", c.Margin)
	}
	a := c.Actuators
	m := &Mirror{cfg: c, pupil: p, pitch: p.Diameter / float64(a-1)}
	limit := p.Diameter/2 + c.Margin*m.pitch
	for iy := 0; iy < a; iy++ {
		for ix := 0; ix < a; ix++ {
			x, y := m.coord(ix), m.coord(iy)
			if math.Hypot(x, y) > limit*(1+1e-12) {
				continue
			}
			m.positions = append(m.positions, [2]float64{x, y})
			m.grid = append(m.grid, iy*a+ix)
		}
	}
	if len(m.positions) == 0 {
		return nil, fmt.Errorf("dm: margin %g pitches: no actuator lies within the pupil", c.Margin)
	}
	// g(d) = exp(ln(c)·(d/pitch)²): g(pitch) = c, so f = c at a neighbour and
	// c² at a diagonal neighbour.
	lnc := math.Log(c.Coupling)
	g := func(d float64) float64 { return math.Exp(lnc * d * d / (m.pitch * m.pitch)) }
	m.first = make([]int, p.N)
	last := make([]int, p.N)
	for i := range p.N {
		x := p.Coord(i)
		m.first[i], last[i] = a, -1
		for j := range a {
			if g(x-m.coord(j)) >= Cutoff {
				m.first[i] = min(m.first[i], j)
				last[i] = max(last[i], j)
			}
		}
		m.width = max(m.width, last[i]-m.first[i]+1)
	}
	m.band = make([]float64, p.N*m.width)
	for i := range p.N {
		m.first[i] = min(m.first[i], a-m.width) // keep the padded band on the grid
		for j := range m.width {
			if k := m.first[i] + j; k <= last[i] {
				if w := g(p.Coord(i) - m.coord(k)); w >= Cutoff {
					m.band[i*m.width+j] = w
				}
			}
		}
	}
	m.act = make([]float64, a*a)
	m.rows = make([]float64, a*p.N)
	return m, nil
}

// coord returns the position in metres of actuator column (or row) i.
func (m *Mirror) coord(i int) float64 {
	return -m.pupil.Diameter/2 + float64(i)*m.pitch
}

// NumValid returns the number of valid actuators, the length of a command.
func (m *Mirror) NumValid() int { return len(m.positions) }

// Positions returns the (x, y) positions in metres of the valid actuators, in
// command order (row-major over the actuator grid). The slice is shared: do
// not modify it.
func (m *Mirror) Positions() [][2]float64 { return m.positions }

// Stroke returns the surface stroke limit in metres (commands are clipped to ±Stroke).
func (m *Mirror) Stroke() float64 { return m.cfg.Stroke }

// Pitch returns the actuator spacing in metres.
func (m *Mirror) Pitch() float64 { return m.pitch }

// Coupling returns the configured neighbour coupling.
func (m *Mirror) Coupling() float64 { return m.cfg.Coupling }

// Clip returns cmd limited to ±Stroke; NaN becomes 0.
func (m *Mirror) Clip(cmd float32) float64 {
	v := float64(cmd)
	switch {
	case math.IsNaN(v):
		return 0
	case v > m.cfg.Stroke:
		return m.cfg.Stroke
	case v < -m.cfg.Stroke:
		return -m.cfg.Stroke
	}
	return v
}

// Saturated returns how many entries of cmd exceed the stroke (or are NaN).
func (m *Mirror) Saturated(cmd []float32) int {
	n := 0
	for _, c := range cmd {
		if v := float64(c); math.IsNaN(v) || math.Abs(v) > m.cfg.Stroke {
			n++
		}
	}
	return n
}

// Surface writes the mirror surface in metres on the pupil grid for the
// command cmd (metres of surface per valid actuator, clipped by Clip):
// surface(x, y) = Σ_k Clip(cmd_k)·g(x − x_k)·g(y − y_k), each factor truncated
// below Cutoff, evaluated as two banded passes (along x, then along y). It
// panics if len(cmd) != NumValid or len(surface) is not the pupil size, and
// allocates nothing.
func (m *Mirror) Surface(cmd []float32, surface []float64) {
	n := m.pupil.N
	if len(cmd) != len(m.positions) || len(surface) != n*n {
		panic(fmt.Sprintf("dm: Surface: len(cmd) %d, len(surface) %d: want %d and %d",
			len(cmd), len(surface), len(m.positions), n*n))
	}
	a, w := m.cfg.Actuators, m.width
	clear(m.act)
	for k, c := range cmd {
		m.act[m.grid[k]] = m.Clip(c)
	}
	for iy := range a {
		act := m.act[iy*a : (iy+1)*a]
		row := m.rows[iy*n : (iy+1)*n]
		for i := range row {
			b := m.band[i*w : (i+1)*w]
			v := act[m.first[i] : m.first[i]+w]
			s := 0.0
			for j, bj := range b {
				s += bj * v[j]
			}
			row[i] = s
		}
	}
	for sy := range n {
		out := surface[sy*n : (sy+1)*n]
		clear(out)
		b := m.band[sy*w : (sy+1)*w]
		for j, bj := range b {
			if bj == 0 {
				continue
			}
			row := m.rows[(m.first[sy]+j)*n : (m.first[sy]+j+1)*n]
			row = row[:len(out)]
			for i := range out {
				out[i] += bj * row[i]
			}
		}
	}
}

// Influence writes the surface in metres of valid actuator k alone at a
// command of 1 m, unclipped, on the pupil grid: the column of the linear map
// that Surface applies to the clipped command. It panics if k is out of range
// or len(surface) is not the pupil size, and allocates nothing.
func (m *Mirror) Influence(k int, surface []float64) {
	n, a, w := m.pupil.N, m.cfg.Actuators, m.width
	if k < 0 || k >= len(m.grid) || len(surface) != n*n {
		panic(fmt.Sprintf("dm: Influence: actuator %d of %d, len(surface) %d: want %d", k, len(m.grid), len(surface), n*n))
	}
	clear(surface)
	ax, ay := m.grid[k]%a, m.grid[k]/a
	weight := func(i, axis int) float64 {
		if j := axis - m.first[i]; j >= 0 && j < w {
			return m.band[i*w+j]
		}
		return 0
	}
	for sy := range n {
		wy := weight(sy, ay)
		if wy == 0 {
			continue
		}
		for sx := range n {
			if wx := weight(sx, ax); wx != 0 {
				surface[sy*n+sx] = wx * wy
			}
		}
	}
}
