package controller

import (
	"fmt"
	"math"
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
