package controller

import "errors"

// Sentinel errors for rejected frames. They are allocated once, so the hot path can
// return them without allocating; compare with errors.Is.
var (
	ErrSlopesLength  = errors.New("controller: slopes vector has the wrong length")
	ErrCommandLength = errors.New("controller: command vector has the wrong length")
	ErrNonFinite     = errors.New("controller: frame holds a NaN or infinite slope")
	ErrChunkRange    = errors.New("controller: slope chunk out of order or out of range")
	ErrIncomplete    = errors.New("controller: frame finished before all slope chunks arrived")
)

// Status says whether a frame was applied and, if not, why it was rejected.
type Status uint8

// Frame outcomes. Every status except StatusOK means the frame was rejected and the
// last good command was held.
const (
	StatusOK Status = iota
	StatusSlopesLength
	StatusCommandLength
	StatusNonFinite
	StatusChunkRange
	StatusIncomplete
)

var statusErrs = [...]error{
	StatusSlopesLength:  ErrSlopesLength,
	StatusCommandLength: ErrCommandLength,
	StatusNonFinite:     ErrNonFinite,
	StatusChunkRange:    ErrChunkRange,
	StatusIncomplete:    ErrIncomplete,
}

var statusNames = [...]string{
	StatusOK:            "ok",
	StatusSlopesLength:  "slopes_length",
	StatusCommandLength: "command_length",
	StatusNonFinite:     "non_finite",
	StatusChunkRange:    "chunk_range",
	StatusIncomplete:    "incomplete",
}

// Err returns nil for StatusOK and the matching sentinel error otherwise.
func (s Status) Err() error {
	if int(s) < len(statusErrs) {
		return statusErrs[s]
	}
	return nil
}

// String returns a short snake_case name, suitable as a metric label value.
func (s Status) String() string {
	if int(s) < len(statusNames) {
		return statusNames[s]
	}
	return "unknown"
}

// Result describes one frame. For a rejected frame only Status is set and the
// command holds the last good one.
type Result struct {
	Status Status
	// Saturated counts actuators whose integrated command fell outside its limits
	// and was clipped this frame.
	Saturated int
	// SlopeRMS is the rms of the reference-subtracted slopes, radians.
	SlopeRMS float64
	// ResidualRMS is the reconstructed residual wavefront rms, metres of optical
	// path: 2·rms over actuators of the reconstruction M⁺·s with its piston removed
	// (see Loop.Step for its limits).
	ResidualRMS float64
	// Strehl is the Maréchal estimate exp(−(2π·ResidualRMS/λ)²) at the wavelength
	// of the parameter set.
	Strehl float64
}

// OK reports whether the frame was applied.
func (r Result) OK() bool { return r.Status == StatusOK }
