package controller

import (
	"fmt"
	"math"

	"gonum.org/v1/gonum/mat"
)

// TiltOffload moves the deformable mirror's tip-tilt onto the tip-tilt mirror,
// so the deformable mirror keeps its stroke for the high orders. It fits the
// plane c_k ≈ c̄ + a·(x_k − x̄) + b·(y_k − ȳ) to the actuator command (least
// squares over the actuator positions, metres), takes the fraction β of it off
// the command and returns the sky tilt that fraction corrected,
// (ρβa, ρβb) radians, where ρ is the mirror's wavefront tilt per unit slope of
// command. An ideal mirror whose surface follows the command has ρ = 2, the
// factor of the reflection (package doc, Sign convention); a mirror whose
// influence functions overlap answers a plane of commands with a steeper
// surface, so ρ is measured (on its surface or from the interaction matrix's
// tip-tilt response) and passed in. Adding that tilt
// to the tip-tilt mirror's command (TipTilt.Offload) leaves the total
// correction as it was.
type TiltOffload struct {
	px, py   []float64 // a = Σ px_k·c_k, b = Σ py_k·c_k
	dx, dy   []float64 // x_k − x̄, y_k − ȳ
	fraction float64   // β
	response float64   // ρ
}

// NewTiltOffload builds the projection for actuators at positions (metres),
// an offload fraction β in (0, 1] per frame and the mirror's tilt response ρ
// (radians of wavefront tilt per metre-per-metre of command slope, finite and
// > 0). The positions must not all lie on one line.
func NewTiltOffload(positions [][2]float64, fraction, response float64) (*TiltOffload, error) {
	if !(fraction > 0 && fraction <= 1) {
		return nil, fmt.Errorf("controller: tilt offload fraction %g: must be in (0, 1]", fraction)
	}
	if !(response > 0) || math.IsInf(response, 0) {
		return nil, fmt.Errorf("controller: tilt offload response %g rad per m/m: must be finite and > 0", response)
	}
	n := len(positions)
	if n < 3 {
		return nil, fmt.Errorf("controller: tilt offload over %d actuators: need at least 3", n)
	}
	var mx, my float64
	for _, p := range positions {
		mx += p[0]
		my += p[1]
	}
	mx /= float64(n)
	my /= float64(n)
	o := &TiltOffload{px: make([]float64, n), py: make([]float64, n), dx: make([]float64, n), dy: make([]float64, n), fraction: fraction, response: response}
	var sxx, sxy, syy float64
	for k, p := range positions {
		o.dx[k], o.dy[k] = p[0]-mx, p[1]-my
		sxx += o.dx[k] * o.dx[k]
		sxy += o.dx[k] * o.dy[k]
		syy += o.dy[k] * o.dy[k]
	}
	det := sxx*syy - sxy*sxy
	if !(det > 1e-12*(sxx+syy)*(sxx+syy)) {
		return nil, fmt.Errorf("controller: tilt offload: actuator positions lie on a line")
	}
	// Normal equations [sxx sxy; sxy syy]·(a, b) = (Σdx·c, Σdy·c), inverted once.
	for k := range positions {
		o.px[k] = (syy*o.dx[k] - sxy*o.dy[k]) / det
		o.py[k] = (sxx*o.dy[k] - sxy*o.dx[k]) / det
	}
	return o, nil
}

// Apply removes the fraction β of the command's tip-tilt plane from cmd (in
// place, metres of surface) and returns the sky tilt it corrected, radians.
// len(cmd) must be the number of positions given to NewTiltOffload; Apply
// panics otherwise. It allocates nothing.
func (o *TiltOffload) Apply(cmd []float32) (tx, ty float64) {
	if len(cmd) != len(o.px) {
		panic(fmt.Sprintf("controller: TiltOffload.Apply: %d actuators, want %d", len(cmd), len(o.px)))
	}
	var a, b float64
	for k, c := range cmd {
		a += o.px[k] * float64(c)
		b += o.py[k] * float64(c)
	}
	a *= o.fraction
	b *= o.fraction
	if math.IsNaN(a) || math.IsInf(a, 0) || math.IsNaN(b) || math.IsInf(b, 0) {
		return 0, 0
	}
	for k := range cmd {
		cmd[k] -= float32(a*o.dx[k] + b*o.dy[k])
	}
	return o.response * a, o.response * b
}

// WithoutSlopeTilt returns a copy of r that ignores the slopes' global
// tip-tilt: R' = R·(I − P), with P the orthogonal projector onto the uniform
// x slopes and the uniform y slopes (slopes interleaved x, y per
// subaperture), which takes from each row of R the mean of its x columns and
// the mean of its y columns. Inverse is filtered the same way, so parameter
// sets with modal gains keep the filter. It is the reconstructor of a laser
// guide star's sensor, whose tip-tilt is meaningless (the beacon moves on the
// sky with the atmosphere's tilt and the sensor sees the tip-tilt mirror's),
// when a natural star's sensor measures tip-tilt instead (common practice;
// Rigaut & Gendron 1992, Astron. Astrophys. 261, 677).
func (r *Reconstructor) WithoutSlopeTilt() *Reconstructor {
	out := *r
	out.Control = withoutSlopeTilt(r.Control)
	if r.Inverse != nil {
		out.Inverse = withoutSlopeTilt(r.Inverse)
	}
	return &out
}

func withoutSlopeTilt(a *mat.Dense) *mat.Dense {
	c := mat.DenseCopyOf(a)
	rows, cols := c.Dims()
	for i := range rows {
		row := c.RawRowView(i)
		var mx, my float64
		for j := 0; j+1 < cols; j += 2 {
			mx += row[j]
			my += row[j+1]
		}
		mx /= float64(cols / 2)
		my /= float64(cols / 2)
		for j := 0; j+1 < cols; j += 2 {
			row[j] -= mx
			row[j+1] -= my
		}
	}
	return c
}

// TiltResponse measures on the reconstructor r the tilt response ρ that
// NewTiltOffload takes: Δ = R·s for uniform x slopes of 1 rad (then y) is the
// command that corrects 1 rad of wavefront tilt, and the slope a of its
// least-squares plane over the actuator positions (metres) gives ρ = 1/a. It
// returns the mean over the two axes, and refuses a reconstructor that does
// not correct tilt (a tilt-filtered one, see WithoutSlopeTilt).
func TiltResponse(r *Reconstructor, positions [][2]float64) (float64, error) {
	if len(positions) != r.Actuators {
		return 0, fmt.Errorf("controller: tilt response: %d positions for %d actuators", len(positions), r.Actuators)
	}
	fit, err := NewTiltOffload(positions, 1, 1)
	if err != nil {
		return 0, err
	}
	s := make([]float64, r.Slopes)
	cmd := make([]float32, r.Actuators)
	var a [2]float64
	for axis := range 2 {
		clear(s)
		for j := axis; j < r.Slopes; j += 2 {
			s[j] = 1
		}
		for i := range r.Actuators {
			cmd[i] = float32(mat.Dot(r.Control.RowView(i), mat.NewVecDense(r.Slopes, s)))
		}
		ax, ay := fit.Apply(cmd)
		a[axis] = [2]float64{ax, ay}[axis]
	}
	rho := 2 / (a[0] + a[1])
	if !(rho > 0) || math.IsInf(rho, 0) || !(a[0] > 0 && a[1] > 0) {
		return 0, fmt.Errorf("controller: tilt response: the reconstructor corrects no tilt (plane slopes %g, %g per rad)", a[0], a[1])
	}
	return rho, nil
}
