package controller

import (
	"fmt"
	"math"
	"sync/atomic"

	"stillsky/controller/mvm"
)

// MaxGain bounds the loop gain: the pure integrator with one frame of delay is
// stable for g < 2 (Jury criterion on z − 1 + g = 0), and every longer delay needs less.
const MaxGain = 2.0

// ParamsConfig lists everything the loop needs for one frame. NewParams validates
// it and builds the float32 control matrix.
type ParamsConfig struct {
	// Reconstructor gives the control matrix and geometry (required).
	Reconstructor *Reconstructor
	// Gain g of the leaky integrator, in [0, MaxGain).
	Gain float64
	// Leak ℓ of the integrator, in [0, 1): c_k = (1 − ℓ)·c_{k−1} + g·Δ_k.
	Leak float64
	// ModalGains are relative per-mode gains (Reconstructor.NumModes entries,
	// finite, >= 0, with Gain·max < MaxGain), folded into the control matrix.
	// Nil means 1 for every mode.
	ModalGains []float64
	// Lower and Upper are per-actuator command limits, metres of surface
	// (Actuators entries each, finite, Lower <= Upper). Both nil means ±Stroke.
	Lower, Upper []float64
	// Stroke is the symmetric limit used when Lower and Upper are nil (finite, > 0).
	Stroke float64
	// Reference slopes (radians), subtracted before reconstruction: the slopes
	// measured on a flat wavefront. Nil means zero.
	Reference []float32
	// StrehlWavelength is the wavelength in metres of the Maréchal estimate (> 0).
	StrehlWavelength float64
	// Kernel chooses the matrix–vector kernel; the zero value picks the fastest
	// float32 kernel the CPU supports with threads chosen by matrix size.
	Kernel mvm.Options
}

// Params is an immutable, validated parameter set. Build it with NewParams off the
// hot path and hand it to Loop.SetParams. Its matrix kernel keeps scratch space,
// so only one Loop at a time may step with a set and with the sets derived from
// it by WithGain or WithLeak (which share its kernel). Release it with Close.
type Params struct {
	cfg     ParamsConfig
	ns, na  int
	kern    *kernel
	lo, hi  []float32
	ref     []float32
	gain    float32
	keep    float32 // 1 − ℓ
	strehlK float64 // (2π/λ)²
	closed  atomic.Bool
}

// kernel is the float32 control matrix and its multiplier, shared between parameter
// sets that differ only in gain, leak, limits or reference.
type kernel struct {
	a    *mvm.Matrix
	mul  mvm.Multiplier
	refs atomic.Int32
}

// newMultiplier is the one place that builds the MVM kernel.
func newMultiplier(a *mvm.Matrix, opts mvm.Options) (mvm.Multiplier, error) {
	return mvm.New(a, opts)
}

func newKernel(r *Reconstructor, modalGains []float64, opts mvm.Options) (*kernel, error) {
	c, err := r.ControlMatrix(modalGains)
	if err != nil {
		return nil, err
	}
	a, err := mvm.NewMatrix(r.Actuators, r.Slopes)
	if err != nil {
		return nil, fmt.Errorf("controller: control matrix: %w", err)
	}
	for i := 0; i < r.Actuators; i++ {
		row := a.Row(i)
		for j := range row {
			row[j] = float32(c.At(i, j))
		}
	}
	for i, v := range a.Data {
		if !isFinite32(v) {
			return nil, fmt.Errorf("controller: control matrix entry (%d, %d) overflows float32", i/a.Stride, i%a.Stride)
		}
	}
	mul, err := newMultiplier(a, opts)
	if err != nil {
		return nil, fmt.Errorf("controller: control matrix kernel: %w", err)
	}
	k := &kernel{a: a, mul: mul}
	k.refs.Store(1)
	return k, nil
}

// NewParams validates c and builds a parameter set. The error names the first
// field that is wrong and its value. The slices of c are copied.
func NewParams(c ParamsConfig) (*Params, error) {
	p, err := newParams(c)
	if err != nil {
		return nil, err
	}
	if p.kern, err = newKernel(c.Reconstructor, c.ModalGains, c.Kernel); err != nil {
		return nil, err
	}
	return p, nil
}

// newParams validates c and fills everything but the kernel.
func newParams(c ParamsConfig) (*Params, error) {
	r := c.Reconstructor
	if err := r.Validate(); err != nil {
		return nil, err
	}
	switch {
	case !(c.Gain >= 0 && c.Gain < MaxGain):
		return nil, fmt.Errorf("controller: gain %g: must be in [0, %g)", c.Gain, MaxGain)
	case !(c.Leak >= 0 && c.Leak < 1):
		return nil, fmt.Errorf("controller: leak %g: must be in [0, 1)", c.Leak)
	case !(c.StrehlWavelength > 0) || math.IsInf(c.StrehlWavelength, 0):
		return nil, fmt.Errorf("controller: Strehl wavelength %g m: must be finite and > 0", c.StrehlWavelength)
	}
	if c.ModalGains != nil {
		if r.Modes == nil {
			return nil, fmt.Errorf("controller: modal gains given (%d) but the %v reconstructor has no modes", len(c.ModalGains), r.Method)
		}
		if len(c.ModalGains) != r.NumModes() {
			return nil, fmt.Errorf("controller: modal gains length %d: want %d modes", len(c.ModalGains), r.NumModes())
		}
		for i, g := range c.ModalGains {
			if !(g >= 0) || math.IsInf(g, 0) {
				return nil, fmt.Errorf("controller: modal gain %d = %g: must be finite and >= 0", i, g)
			}
			if c.Gain*g >= MaxGain {
				return nil, fmt.Errorf("controller: modal gain %d = %g: gain × modal gain = %g must be < %g", i, g, c.Gain*g, MaxGain)
			}
		}
	}
	p := &Params{ns: r.Slopes, na: r.Actuators, gain: float32(c.Gain), keep: float32(1 - c.Leak)}
	p.strehlK = math.Pow(2*math.Pi/c.StrehlWavelength, 2)
	p.lo, p.hi = make([]float32, p.na), make([]float32, p.na)
	switch {
	case c.Lower == nil && c.Upper == nil:
		if !(c.Stroke > 0) || math.IsInf(c.Stroke, 0) || c.Stroke > math.MaxFloat32 {
			return nil, fmt.Errorf("controller: stroke %g m: must be finite and > 0 (or give lower and upper limits)", c.Stroke)
		}
		for i := range p.lo {
			p.lo[i], p.hi[i] = -float32(c.Stroke), float32(c.Stroke)
		}
	case len(c.Lower) != p.na:
		return nil, fmt.Errorf("controller: lower limits length %d: want %d actuators", len(c.Lower), p.na)
	case len(c.Upper) != p.na:
		return nil, fmt.Errorf("controller: upper limits length %d: want %d actuators", len(c.Upper), p.na)
	default:
		for i := range p.lo {
			lo, hi := c.Lower[i], c.Upper[i]
			if math.IsNaN(lo) || math.IsInf(lo, 0) || math.Abs(lo) > math.MaxFloat32 {
				return nil, fmt.Errorf("controller: lower limit %d = %g m: must be finite", i, lo)
			}
			if math.IsNaN(hi) || math.IsInf(hi, 0) || math.Abs(hi) > math.MaxFloat32 {
				return nil, fmt.Errorf("controller: upper limit %d = %g m: must be finite", i, hi)
			}
			if lo > hi {
				return nil, fmt.Errorf("controller: limits of actuator %d: lower %g m > upper %g m", i, lo, hi)
			}
			p.lo[i], p.hi[i] = float32(lo), float32(hi)
		}
	}
	p.ref = make([]float32, p.ns)
	if c.Reference != nil {
		if len(c.Reference) != p.ns {
			return nil, fmt.Errorf("controller: reference slopes length %d: want %d slopes", len(c.Reference), p.ns)
		}
		for i, v := range c.Reference {
			if !isFinite32(v) {
				return nil, fmt.Errorf("controller: reference slope %d = %g: must be finite", i, v)
			}
		}
		copy(p.ref, c.Reference)
	}
	p.cfg = c
	p.cfg.ModalGains = cloneSlice(c.ModalGains)
	p.cfg.Lower, p.cfg.Upper = cloneSlice(c.Lower), cloneSlice(c.Upper)
	p.cfg.Reference = cloneSlice(c.Reference)
	return p, nil
}

func cloneSlice[T any](s []T) []T {
	if s == nil {
		return nil
	}
	return append([]T(nil), s...)
}

// derive builds a new set from c, sharing p's control matrix when the
// reconstructor and modal gains are unchanged.
func (p *Params) derive(c ParamsConfig, rebuild bool) (*Params, error) {
	if p.closed.Load() {
		return nil, fmt.Errorf("controller: params: closed")
	}
	if !rebuild {
		q, err := newParams(c)
		if err != nil {
			return nil, err
		}
		p.kern.refs.Add(1)
		q.kern = p.kern
		return q, nil
	}
	return NewParams(c)
}

// WithGain returns a copy of p with gain g, sharing its control matrix.
func (p *Params) WithGain(g float64) (*Params, error) {
	c := p.Config()
	c.Gain = g
	return p.derive(c, false)
}

// WithLeak returns a copy of p with leak ℓ, sharing its control matrix.
func (p *Params) WithLeak(leak float64) (*Params, error) {
	c := p.Config()
	c.Leak = leak
	return p.derive(c, false)
}

// WithModalGains returns a copy of p with new modal gains (nil for unity). It
// rebuilds the control matrix: call it off the hot path.
func (p *Params) WithModalGains(gains []float64) (*Params, error) {
	c := p.Config()
	c.ModalGains = gains
	return p.derive(c, true)
}

// Config returns a copy of the configuration p was built from.
func (p *Params) Config() ParamsConfig {
	c := p.cfg
	c.ModalGains = cloneSlice(c.ModalGains)
	c.Lower, c.Upper = cloneSlice(c.Lower), cloneSlice(c.Upper)
	c.Reference = cloneSlice(c.Reference)
	return c
}

// Slopes returns the number of slopes a frame must have.
func (p *Params) Slopes() int { return p.ns }

// Actuators returns the number of actuators a command has.
func (p *Params) Actuators() int { return p.na }

// Gain returns the integrator gain.
func (p *Params) Gain() float64 { return p.cfg.Gain }

// Leak returns the integrator leak.
func (p *Params) Leak() float64 { return p.cfg.Leak }

// Reconstructor returns the reconstructor the set was built on.
func (p *Params) Reconstructor() *Reconstructor { return p.cfg.Reconstructor }

// ControlMatrix returns the float32 control matrix used by Step (with modal gains
// folded in). It is shared: do not modify it.
func (p *Params) ControlMatrix() *mvm.Matrix { return p.kern.a }

// Close releases the matrix kernel once every set sharing it is closed. Close a
// set only when no Loop can still step with it (after SetParams has replaced it
// and the following frame has returned). Closing twice does nothing.
func (p *Params) Close() {
	if p.closed.Swap(true) {
		return
	}
	if p.kern.refs.Add(-1) == 0 {
		p.kern.mul.Close()
	}
}
