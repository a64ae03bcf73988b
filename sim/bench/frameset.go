package bench

import "fmt"

// FrameSet is a fixed set of slope frames that a camera streams in turn on
// its clock, from the first to the last and over again: frame k of the
// stream (k ≥ 1) carries frame (k−1) mod Len of the set. A camera that streams
// a FrameSet costs a copy per frame and no simulation, so that a latency
// measurement against it sees the loop and its transport, not the
// simulator's physics. The bench's pre-rendered camera (Options.Prerendered)
// fills one at start; frames recorded from a running loop make one just as
// well (NewFrameSet with the recording's slopes).
type FrameSet struct {
	slopes []float32 // Len frames of n slopes each, frame after frame
	n      int
	// flux is the photo-electrons per valid subaperture that every frame of
	// the set reports: the sensor's as it rendered the set, nil (reported as
	// 0, not measured) for a set made from slopes alone.
	flux []float32
	// pixels, for a pixel camera's set, holds each frame's detector image as
	// the stream sends it (16-bit little-endian), frame after frame, with
	// slopes then the noise-free spot offsets it was rendered from.
	pixels     []byte
	frameBytes int
}

// NewFrameSet makes a set of len(slopes)/perFrame frames of perFrame slopes
// each, frame after frame in slopes (which the set keeps, not copies). It
// refuses an empty set and a slope count that does not divide len(slopes).
func NewFrameSet(slopes []float32, perFrame int) (*FrameSet, error) {
	if perFrame < 1 || len(slopes) < perFrame || len(slopes)%perFrame != 0 {
		return nil, fmt.Errorf("frame set: %d slopes do not make whole frames of %d", len(slopes), perFrame)
	}
	return &FrameSet{slopes: slopes, n: perFrame}, nil
}

// Len returns the number of frames in the set.
func (s *FrameSet) Len() int { return len(s.slopes) / s.n }

// NumSlopes returns the slopes per frame.
func (s *FrameSet) NumSlopes() int { return s.n }

// Frame returns the slopes that frame k (k ≥ 1) of a stream carries, a view
// into the set: frame (k−1) mod Len.
func (s *FrameSet) Frame(k uint64) []float32 {
	i := int((k - 1) % uint64(s.Len()))
	return s.slopes[i*s.n : (i+1)*s.n]
}

// Pixels returns the detector image that frame k (k ≥ 1) of a pixel
// camera's stream carries, a view into the set; nil for a slope set.
func (s *FrameSet) Pixels(k uint64) []byte {
	if s.pixels == nil {
		return nil
	}
	i := int((k - 1) % uint64(s.Len()))
	return s.pixels[i*s.frameBytes : (i+1)*s.frameBytes]
}

// prerender renders n frames of what the sensor of sys sees behind a
// corrected wavefront: the calibration source (no turbulence, a flat mirror)
// with the sensor's noise as the scenario sets it — the residual a closed loop
// at its limit would leave. A closed loop fed them over and over integrates
// zero-mean noise, which its leak keeps bounded; open-loop turbulence frames
// would wind its integrator up to the stroke limits. sys is left on the sky,
// with its own noise setting and a flat mirror.
//
// With a pixel camera px (nil for slopes) each frame is also rendered to
// pixels, the detector drawing the noise from the noise-free slopes as it
// does on the sky (the slopes are then those noise-free offsets), so that a
// pixel camera costs a copy per frame too.
func prerender(sys *System, px *pixelCamera, n int) *FrameSet {
	ns := sys.NumSlopes()
	slopes := make([]float32, n*ns)
	sys.SetCommand(make([]float32, sys.NumActuators()))
	sys.SetTurbulence(false)
	sys.SetNoise(sys.Scenario().WFS.Noise && px == nil)
	var pixels []byte
	if px != nil {
		pixels = make([]byte, n*px.bytes())
	}
	for i := range n {
		sys.Frame(slopes[i*ns : (i+1)*ns])
		if px != nil {
			px.render(pixels[i*px.bytes():(i+1)*px.bytes()], slopes[i*ns:(i+1)*ns])
		}
	}
	sys.SetTurbulence(true)
	sys.SetNoise(sys.Scenario().WFS.Noise && px == nil)
	set, _ := NewFrameSet(slopes, ns) // n ≥ 1 whole frames by construction
	set.flux = append([]float32(nil), sys.Flux()...)
	if px != nil {
		set.pixels, set.frameBytes = pixels, px.bytes()
	}
	return set
}
