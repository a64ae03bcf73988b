package controller

import (
	"fmt"
	"math"
	"sync/atomic"
)

// TipTiltParams are the tip-tilt loop's own integrator settings, independent
// of the high-order loop's.
type TipTiltParams struct {
	// Gain g of the tip-tilt integrator, in [0, MaxGain).
	Gain float64
	// Leak ℓ, in [0, 1): c_k = (1 − ℓ)·c_{k−1} + g·m_k.
	Leak float64
	// Stroke is the tip-tilt mirror's limit on each axis, radians of tilt on
	// the sky (finite, > 0). The command is clamped there, and so is the
	// integrator's state (anti-windup).
	Stroke float64
}

func (p TipTiltParams) validate() error {
	switch {
	case !(p.Gain >= 0 && p.Gain < MaxGain):
		return fmt.Errorf("controller: tip-tilt gain %g: must be in [0, %g)", p.Gain, MaxGain)
	case !(p.Leak >= 0 && p.Leak < 1):
		return fmt.Errorf("controller: tip-tilt leak %g: must be in [0, 1)", p.Leak)
	case !(p.Stroke > 0) || math.IsInf(p.Stroke, 0):
		return fmt.Errorf("controller: tip-tilt stroke %g rad: must be finite and > 0", p.Stroke)
	}
	return nil
}

// TipTilt is the tip-tilt loop's leaky integrator: each frame of the
// natural-star tilt sensor gives the residual tilt m = (atmosphere − mirror),
// radians on the sky per axis, and the tip-tilt mirror's command becomes
//
//	c_k = clamp((1 − ℓ)·c_{k−1} + g·m_k, ±Stroke)
//
// With the command applied one frame after the measurement, the residual's
// rejection is E(z) = (1 − (1−ℓ)z⁻¹)/(1 − (1−ℓ)z⁻¹ + g·z⁻¹) and the sensor noise
// reaches the residual through 1 − E(z) (the tests check both).
//
// Step allocates nothing; parameters are swapped between frames with
// SetParams through an atomic pointer, so the daemon may change them while the
// loop runs. Step itself belongs to one goroutine.
type TipTilt struct {
	params atomic.Pointer[TipTiltParams]
	cmd    [2]float64
}

// NewTipTilt validates p and returns an integrator with a zero command.
func NewTipTilt(p TipTiltParams) (*TipTilt, error) {
	t := &TipTilt{}
	if err := t.SetParams(p); err != nil {
		return nil, err
	}
	return t, nil
}

// SetParams validates p and makes it the set used from the next Step on. A
// refused set leaves the old one in place; the refusal names the field.
func (t *TipTilt) SetParams(p TipTiltParams) error {
	if err := p.validate(); err != nil {
		return err
	}
	t.params.Store(&p)
	return nil
}

// Params returns the set in use.
func (t *TipTilt) Params() TipTiltParams { return *t.params.Load() }

// Step takes one frame's residual tilt (mx, my), radians, and returns the new
// mirror command and whether either axis was clamped at the stroke. A
// non-finite measurement is refused: the command is held and ok is false.
func (t *TipTilt) Step(mx, my float64) (cx, cy float64, saturated, ok bool) {
	if math.IsNaN(mx) || math.IsInf(mx, 0) || math.IsNaN(my) || math.IsInf(my, 0) {
		return t.cmd[0], t.cmd[1], false, false
	}
	p := t.params.Load()
	keep := 1 - p.Leak
	var sx, sy bool
	t.cmd[0], sx = clampStroke(keep*t.cmd[0]+p.Gain*mx, p.Stroke)
	t.cmd[1], sy = clampStroke(keep*t.cmd[1]+p.Gain*my, p.Stroke)
	return t.cmd[0], t.cmd[1], sx || sy, true
}

// Offload adds the tilt (tx, ty), radians, taken off the deformable mirror by
// TiltOffload.Apply, to the command and the integrator's state, clamped at the
// stroke; it reports whether either axis was clamped (the part beyond the
// stroke is then left for the loops to take up again). A non-finite tilt is
// ignored.
func (t *TipTilt) Offload(tx, ty float64) (saturated bool) {
	if math.IsNaN(tx) || math.IsInf(tx, 0) || math.IsNaN(ty) || math.IsInf(ty, 0) {
		return false
	}
	s := t.params.Load().Stroke
	var sx, sy bool
	t.cmd[0], sx = clampStroke(t.cmd[0]+tx, s)
	t.cmd[1], sy = clampStroke(t.cmd[1]+ty, s)
	return sx || sy
}

// Command returns the current mirror command, radians per axis.
func (t *TipTilt) Command() (cx, cy float64) { return t.cmd[0], t.cmd[1] }

// Reset zeroes the command (opening the loop flattens the mirror).
func (t *TipTilt) Reset() { t.cmd = [2]float64{} }

func clampStroke(c, s float64) (float64, bool) {
	switch {
	case c > s:
		return s, true
	case c < -s:
		return -s, true
	}
	return c, false
}
