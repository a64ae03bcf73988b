package analysis

import (
	"fmt"
	"math"

	"gonum.org/v1/gonum/mat"

	"stillsky/controller"
)

// Mirror describes a deformable mirror as its drive electronics do: actuator
// positions on the pupil, pitch, and the neighbour coupling of Gaussian influence
// functions exp(ln(c)·r²/p²), which are c at the next actuator (common practice).
type Mirror struct {
	// Positions of the driven actuators on the pupil, metres (x, y).
	Positions [][2]float64
	// Pitch in metres and Coupling in (0, 1).
	Pitch, Coupling float64
}

// influenceCutoff truncates each axis factor of the influence functions (as the
// simulated mirror does: 2.2 pitches for a coupling of 0.15).
const influenceCutoff = 1e-4

// Surface maps actuator commands to the mirror surface over a sampled circular
// pupil, to measure the surface variance a command makes.
type Surface struct {
	n     int
	coord func(int) float64 // sample centre, metres from the pupil centre
	mask  []bool
	lit   int
	start []int // actuator k reaches samples idx[start[k]:start[k+1]] with weights w
	idx   []int32
	w     []float64
	buf   []float64
}

// NewSurface samples a pupil of the given diameter and central obstruction
// (a fraction of the diameter) at samplesPerPitch samples per actuator pitch.
func NewSurface(diameter, obstruction float64, m Mirror, samplesPerPitch int) (*Surface, error) {
	switch {
	case !(diameter > 0) || math.IsInf(diameter, 0):
		return nil, fmt.Errorf("analysis: pupil diameter %g m: must be > 0", diameter)
	case !(obstruction >= 0 && obstruction < 1):
		return nil, fmt.Errorf("analysis: obstruction %g: must be in [0, 1)", obstruction)
	case !(m.Pitch > 0) || math.IsInf(m.Pitch, 0):
		return nil, fmt.Errorf("analysis: actuator pitch %g m: must be > 0", m.Pitch)
	case !(m.Coupling > 0 && m.Coupling < 1):
		return nil, fmt.Errorf("analysis: coupling %g: must be in (0, 1)", m.Coupling)
	case len(m.Positions) == 0:
		return nil, fmt.Errorf("analysis: mirror without actuators")
	case samplesPerPitch < 1 || samplesPerPitch > 32:
		return nil, fmt.Errorf("analysis: %d samples per pitch: must be in [1, 32]", samplesPerPitch)
	}
	n := int(math.Ceil(diameter / m.Pitch * float64(samplesPerPitch)))
	step := diameter / float64(n)
	coord := func(i int) float64 { return -diameter/2 + (float64(i)+0.5)*step }
	s := &Surface{n: n, coord: coord, mask: make([]bool, n*n), buf: make([]float64, n*n), start: make([]int, len(m.Positions)+1)}
	r2o, r2i := diameter*diameter/4, obstruction*obstruction*diameter*diameter/4
	for iy := range n {
		for ix := range n {
			r2 := coord(ix)*coord(ix) + coord(iy)*coord(iy)
			if r2 <= r2o && r2 >= r2i {
				s.mask[iy*n+ix] = true
				s.lit++
			}
		}
	}
	lnc := math.Log(m.Coupling)
	reach := m.Pitch * math.Sqrt(math.Log(influenceCutoff)/lnc)
	g := func(d float64) float64 { return math.Exp(lnc * d * d / (m.Pitch * m.Pitch)) }
	for k, p := range m.Positions {
		if math.IsNaN(p[0]) || math.IsNaN(p[1]) || math.IsInf(p[0], 0) || math.IsInf(p[1], 0) {
			return nil, fmt.Errorf("analysis: actuator %d position (%g, %g): must be finite", k, p[0], p[1])
		}
		lo := func(c float64) int { return max(0, int(math.Floor((c-reach+diameter/2)/step))) }
		hi := func(c float64) int { return min(n-1, int(math.Ceil((c+reach+diameter/2)/step))) }
		for iy := lo(p[1]); iy <= hi(p[1]); iy++ {
			gy := g(coord(iy) - p[1])
			if gy < influenceCutoff {
				continue
			}
			for ix := lo(p[0]); ix <= hi(p[0]); ix++ {
				gx := g(coord(ix) - p[0])
				if gx < influenceCutoff || !s.mask[iy*n+ix] {
					continue
				}
				s.idx = append(s.idx, int32(iy*n+ix))
				s.w = append(s.w, gx*gy)
			}
		}
		s.start[k+1] = len(s.idx)
	}
	if s.lit == 0 {
		return nil, fmt.Errorf("analysis: pupil of %g m sampled at %d: no sample lit", diameter, n)
	}
	return s, nil
}

// Actuators returns the number of actuators a command has.
func (s *Surface) Actuators() int { return len(s.start) - 1 }

// Variance returns the variance over the pupil of the surface that command cmd
// (metres per actuator) forms, piston removed, in m². It panics if len(cmd) is
// not Actuators.
func (s *Surface) Variance(cmd []float64) float64 {
	if len(cmd) != s.Actuators() {
		panic(fmt.Sprintf("analysis: Surface.Variance: %d values, want %d", len(cmd), s.Actuators()))
	}
	s.form(cmd)
	var sum, sum2 float64
	for i, v := range s.buf {
		if s.mask[i] {
			sum += v
			sum2 += v * v
		}
	}
	n := float64(s.lit)
	return math.Max(sum2/n-(sum/n)*(sum/n), 0)
}

// form writes the surface of cmd into s.buf.
func (s *Surface) form(cmd []float64) {
	clear(s.buf)
	for k, c := range cmd {
		if c == 0 {
			continue
		}
		for j := s.start[k]; j < s.start[k+1]; j++ {
			s.buf[s.idx[j]] += c * s.w[j]
		}
	}
}

// zernikeShare returns ⟨Z_j, h⟩/⟨Z_j, Z_j⟩ over the lit samples for the surface
// h that cmd forms, both with their mean removed; R is the pupil radius of Z_j.
func (s *Surface) zernikeShare(cmd []float64, j int, R float64) float64 {
	s.form(cmd)
	var zm, hm float64
	z := make([]float64, len(s.buf))
	for iy := range s.n {
		for ix := range s.n {
			i := iy*s.n + ix
			if s.mask[i] {
				z[i] = zernikeAt(j, s.coord(ix)/R, s.coord(iy)/R)
				zm += z[i]
				hm += s.buf[i]
			}
		}
	}
	zm /= float64(s.lit)
	hm /= float64(s.lit)
	var zh, zz float64
	for i, lit := range s.mask {
		if lit {
			zh += (z[i] - zm) * (s.buf[i] - hm)
			zz += (z[i] - zm) * (z[i] - zm)
		}
	}
	return zh / zz
}

// PropagateNoise returns, per controlled mode of r, the per-frame surface variance
// (m², piston removed) that independent slope noise of rms slopeNoise[j] radians
// (one entry per slope) puts there at unit gain: the command noise of mode i is
// Modes[:, i]·(Inverse[i, :]·n), so its surface variance is
// Var(Modes[:, i])·Σⱼ Inverse[i, j]² σⱼ². Noise in different singular modes is
// uncorrelated when σ is the same on every slope, so the modes add. A
// reconstructor without modes (a loaded control matrix) gives one entry,
// Σⱼ σⱼ² Var(R[:, j]), exact for independent noise.
func PropagateNoise(r *controller.Reconstructor, slopeNoise []float64, s *Surface) ([]float64, error) {
	if err := r.Validate(); err != nil {
		return nil, err
	}
	if len(slopeNoise) != r.Slopes {
		return nil, fmt.Errorf("analysis: %d slope noise values for %d slopes", len(slopeNoise), r.Slopes)
	}
	if s.Actuators() != r.Actuators {
		return nil, fmt.Errorf("analysis: mirror model of %d actuators for a reconstructor of %d", s.Actuators(), r.Actuators)
	}
	for j, v := range slopeNoise {
		if !(v >= 0) || math.IsInf(v, 0) {
			return nil, fmt.Errorf("analysis: slope noise %d = %g rad: must be finite and >= 0", j, v)
		}
	}
	col := make([]float64, r.Actuators)
	if r.Modes == nil {
		total := 0.0
		for j, sig := range slopeNoise {
			if sig == 0 {
				continue
			}
			mat.Col(col, j, r.Control)
			total += sig * sig * s.Variance(col)
		}
		return []float64{total}, nil
	}
	out := make([]float64, r.NumModes())
	for i := range out {
		v := 0.0
		for j, sig := range slopeNoise {
			a := r.Inverse.At(i, j)
			v += a * a * sig * sig
		}
		mat.Col(col, i, r.Modes)
		out[i] = v * s.Variance(col)
	}
	return out, nil
}

// LowOrderOrders is the number of radial orders whose steady-state correction
// LowOrderCorrection measures: the modes with most of the turbulence's power.
const LowOrderOrders = 5

// LowOrderModes returns the number of modes LowOrderCorrection returns.
func LowOrderModes() int { return modesUpTo(LowOrderOrders) - 1 }

// LowOrderCorrection returns, for Noll modes 2 … (LowOrderOrders+1)(LowOrderOrders+2)/2,
// the share κ_j of the mode that the loop forms in steady state: the sensor's
// response to the mode (ZernikeSlopes), the command Δ = R·s_j that nulls it
// (R the control matrix), and κ_j = ⟨Z_j, 2·h(Δ)⟩/⟨Z_j, Z_j⟩ over the pupil for
// the surface h it forms (reflection doubles it). A mirror that forms the modes
// exactly where the sensor sees them gives κ = 1; the last actuators at the pupil
// edge make it smaller, and the loop then leaves (1 − κ) of each mode in place.
func LowOrderCorrection(r *controller.Reconstructor, g SensorGeometry, s *Surface) ([]float64, error) {
	if err := r.Validate(); err != nil {
		return nil, err
	}
	modes := modesUpTo(LowOrderOrders) - 1
	z, err := ZernikeSlopes(g, modes)
	if err != nil {
		return nil, err
	}
	if rows, _ := z.Dims(); rows != r.Slopes || s.Actuators() != r.Actuators {
		return nil, fmt.Errorf("analysis: %d slopes and %d actuators described for a reconstructor of %d × %d", rows, s.Actuators(), r.Slopes, r.Actuators)
	}
	out := make([]float64, modes)
	col := make([]float64, r.Slopes)
	var c mat.VecDense
	for m := range modes {
		mat.Col(col, m, z)
		c.MulVec(r.Control, mat.NewVecDense(len(col), col))
		out[m] = 2 * s.zernikeShare(c.RawVector().Data, m+2, g.PupilDiameter/2)
	}
	return out, nil
}
