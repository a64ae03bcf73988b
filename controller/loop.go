package controller

import (
	"fmt"
	"math"
	"sync/atomic"
)

// Loop is the per-frame controller: a leaky integrator on the reconstructed slopes
// with stroke limits and anti-windup. Step, StepChunk, Finish, Reset, SetCommand
// and Command must be called from one goroutine (the real-time one); SetParams and
// Params may be called from any goroutine.
type Loop struct {
	params atomic.Pointer[Params]
	ns, na int
	state  []float32 // integrator state = last good command (clipped)
	delta  []float32 // Δ = R·(s − s_ref), accumulated chunk by chunk
	resid  []float32 // s − s_ref

	// The frame in progress.
	frame  *Params // parameters pinned at the first chunk
	next   int     // first column not yet received
	status Status
	sumsq  float64 // Σ (s − s_ref)²
}

// NewLoop returns a loop with parameters p and a zero command (clipped into the
// limits of p).
func NewLoop(p *Params) (*Loop, error) {
	if p == nil {
		return nil, fmt.Errorf("controller: loop params: nil")
	}
	l := &Loop{
		ns: p.ns, na: p.na,
		state: make([]float32, p.na), delta: make([]float32, p.na), resid: make([]float32, p.ns),
	}
	l.params.Store(p)
	l.Reset()
	return l, nil
}

// SetParams swaps in p for the next frame (a frame in progress keeps the set it
// started with). It refuses a nil set or one of another geometry, leaving the
// running set untouched.
func (l *Loop) SetParams(p *Params) error {
	if p == nil {
		return fmt.Errorf("controller: params: nil")
	}
	if p.ns != l.ns || p.na != l.na {
		return fmt.Errorf("controller: params geometry %d slopes × %d actuators: loop has %d × %d", p.ns, p.na, l.ns, l.na)
	}
	l.params.Store(p)
	return nil
}

// Params returns the running parameter set.
func (l *Loop) Params() *Params { return l.params.Load() }

// Step runs one frame of the control law and stores the command into cmd:
//
//	s' = s − s_ref;  Δ = R·s';  c_k = clip((1 − ℓ)·c_{k−1} + g·Δ, lower, upper)
//
// with R = −M⁺ (see the package sign convention) and the integrator keeping the
// clipped value (anti-windup). len(slopes) must be Params.Slopes() and len(cmd)
// Params.Actuators(). A frame of the wrong length, with a NaN or infinite slope, or
// whose reconstruction overflows is rejected: the state is unchanged, cmd receives
// the last good command (if its length is right) and Result.Status says why.
//
// The residual estimate is σ = 2·rms_i(Δᵢ − mean Δ) metres of optical path: with
// unit modal gains Δ = −M⁺s' is the mirror surface that would null the slopes, so
// 2Δ is the reconstructed residual optical path in actuator space (reflection
// doubles it), piston removed. It is cheap (no second MVM) but only an indicator:
// it sees only what the sensor and mirror can represent (no fitting or aliasing
// error), it includes the frame's measurement noise, it counts actuator values
// rather than surface (influence functions that sum to more than one, as a
// Gaussian with 15 % coupling does, about 1.7, make the surface larger), and with
// non-unit modal gains it weighs each mode by its gain. Step allocates nothing.
func (l *Loop) Step(slopes, cmd []float32) Result {
	if len(slopes) != l.ns {
		return l.hold(cmd, StatusSlopesLength)
	}
	l.StepChunk(slopes, 0, l.ns)
	return l.Finish(cmd)
}

// StepChunk feeds the slopes of columns [c0, c1) of a frame that arrives in chunks,
// accumulating their share of Δ = R·s' with one partial MVM. slopes is the whole
// frame buffer (length Params.Slopes()); only slopes[c0:c1] is read. A chunk with
// c0 = 0 begins a new frame (pinning the parameter set); the others must follow in
// order (c0 = the previous c1). Finish completes the frame with the same control
// law as Step. The returned status is that of the frame so far; once a chunk is
// bad, later chunks are ignored and Finish rejects the frame. It allocates nothing.
func (l *Loop) StepChunk(slopes []float32, c0, c1 int) Status {
	if c0 == 0 {
		l.frame = l.params.Load()
		l.next, l.status, l.sumsq = 0, StatusOK, 0
		clear(l.delta)
	}
	switch {
	case l.frame == nil:
		return StatusChunkRange
	case l.status != StatusOK:
		return l.status
	case len(slopes) != l.ns:
		l.status = StatusSlopesLength
	case c0 != l.next || c1 < c0 || c1 > l.ns:
		l.status = StatusChunkRange
	}
	if l.status != StatusOK {
		return l.status
	}
	p := l.frame
	in, ref, res := slopes[c0:c1], p.ref[c0:c1], l.resid[c0:c1]
	ref, res = ref[:len(in)], res[:len(in)]
	var ss float64
	for j, v := range in {
		if !isFinite32(v) {
			l.status = StatusNonFinite
			return l.status
		}
		r := v - ref[j]
		res[j] = r
		ss += float64(r) * float64(r)
	}
	l.sumsq += ss
	p.kern.mul.MulVecCols(l.delta, l.resid, c0, c1)
	l.next = c1
	return StatusOK
}

// Finish completes a chunked frame: it applies the integrator, limits and
// anti-windup to the accumulated Δ and stores the command into cmd, exactly as Step.
// A frame with missing chunks is rejected with StatusIncomplete. It allocates nothing.
func (l *Loop) Finish(cmd []float32) Result {
	p, status, complete := l.frame, l.status, l.next == l.ns
	l.frame, l.next = nil, 0
	if len(cmd) != l.na {
		return Result{Status: StatusCommandLength}
	}
	switch {
	case p == nil:
		return l.hold(cmd, StatusIncomplete)
	case status != StatusOK:
		return l.hold(cmd, status)
	case !complete:
		return l.hold(cmd, StatusIncomplete)
	}
	// Δ is finite unless the MVM overflowed float32; reject such a frame too, so
	// nothing non-finite reaches the state or the mirror.
	var sum, sum2 float64
	for _, d := range l.delta {
		if !isFinite32(d) {
			return l.hold(cmd, StatusNonFinite)
		}
		sum += float64(d)
		sum2 += float64(d) * float64(d)
	}
	sat := integrate(l.state, l.delta, p.lo, p.hi, p.keep, p.gain)
	copy(cmd, l.state)
	n := float64(l.na)
	varDelta := math.Max(sum2/n-(sum/n)*(sum/n), 0)
	sigma := 2 * math.Sqrt(varDelta)
	return Result{
		Status:      StatusOK,
		Saturated:   sat,
		SlopeRMS:    math.Sqrt(l.sumsq / float64(l.ns)),
		ResidualRMS: sigma,
		Strehl:      math.Exp(-p.strehlK * sigma * sigma),
	}
}

// integrate is the control law on the state, in place:
// state ← clip(keep·state + gain·delta, lo, hi), keep = 1 − ℓ. The state keeps the
// clipped value, which is the anti-windup. It returns the number of clipped actuators.
func integrate(state, delta, lo, hi []float32, keep, gain float32) int {
	delta, lo, hi = delta[:len(state)], lo[:len(state)], hi[:len(state)]
	sat := 0
	for i, c := range state {
		c = keep*c + gain*delta[i]
		if c > hi[i] {
			c = hi[i]
			sat++
		} else if c < lo[i] {
			c = lo[i]
			sat++
		}
		state[i] = c
	}
	return sat
}

// hold writes the last good command into cmd (when its length is right) and
// returns a rejection.
func (l *Loop) hold(cmd []float32, s Status) Result {
	if len(cmd) != l.na {
		return Result{Status: StatusCommandLength}
	}
	copy(cmd, l.state)
	return Result{Status: s}
}

// Reset sets the integrator to zero, clipped into the running limits.
func (l *Loop) Reset() {
	p := l.params.Load()
	for i := range l.state {
		l.state[i] = min(max(0, p.lo[i]), p.hi[i])
	}
}

// SetCommand sets the integrator state, i.e. the command held and integrated from,
// to c clipped into the running limits (for hold and decaying states kept by the
// caller). It refuses a command of the wrong length or with non-finite entries.
func (l *Loop) SetCommand(c []float32) error {
	if len(c) != l.na {
		return fmt.Errorf("controller: command length %d: want %d actuators: %w", len(c), l.na, ErrCommandLength)
	}
	for i, v := range c {
		if !isFinite32(v) {
			return fmt.Errorf("controller: command %d = %g: must be finite", i, v)
		}
	}
	p := l.params.Load()
	for i, v := range c {
		l.state[i] = min(max(v, p.lo[i]), p.hi[i])
	}
	return nil
}

// Command copies the integrator state (the last good command) into dst.
func (l *Loop) Command(dst []float32) error {
	if len(dst) != l.na {
		return fmt.Errorf("controller: command length %d: want %d actuators: %w", len(dst), l.na, ErrCommandLength)
	}
	copy(dst, l.state)
	return nil
}
