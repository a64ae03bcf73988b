package bench

import (
	"fmt"
	"log/slog"
	"sync"
	"sync/atomic"
	"time"

	stillskyv1 "stillsky/proto/stillsky/v1"
	"stillsky/sim/optics"
	"stillsky/sim/scenario"
)

// Options set how the bench keeps time.
type Options struct {
	// Lockstep produces frame k only after the command for frame k−DelayFrames has
	// arrived (reproducible runs); otherwise frames come at the scenario's rate and
	// commands apply on arrival.
	Lockstep bool
	// DelayFrames is the loop delay modelled in lockstep mode (>= 1); 0 takes the
	// scenario's value.
	DelayFrames int
	// StrehlEvery is the number of frames between evaluations of the true science
	// Strehl ratio (a PSF computation); 0 chooses 10.
	StrehlEvery int
	// LockstepTimeout bounds the wait for a command in lockstep mode, after which the
	// bench goes on with the mirror's current shape; 0 chooses one second.
	LockstepTimeout time.Duration
	// ReadoutTime spreads the chunks of a chunked frame over this time, as a
	// detector read out row by row would deliver them; 0 sends them back to back.
	ReadoutTime time.Duration
	// Gated, with Lockstep, holds the bench before its first sky frame until
	// HoldAfter moves the limit: a driver then ends each phase on an exact sky
	// frame (WaitHeld), and the science camera samples every StrehlEvery-th
	// sky frame, so that a run is the same whatever the calibration source's
	// frames and the machine's timing were.
	Gated bool
	// Logger receives the bench's log lines; nil discards them.
	Logger *slog.Logger
	// IdlePriority runs the free-running simulation and the science camera on
	// threads of their own under SCHED_IDLE, so that on a machine shared with
	// the loop they take only the CPU time nothing else wants and never delay a
	// frame's delivery or a command's arrival. For a process of the bench's
	// own, whose GOMAXPROCS should then be IdleExtraProcs above its default.
	IdlePriority bool
	// Prerendered, if above 0, renders this many frames at start (the
	// sensor's noise behind a corrected wavefront, see FrameSet) and streams
	// them in turn, free-running, while the sky is selected: the camera then
	// costs a copy per frame, and the simulator's physics is off the CPU while
	// a latency benchmark measures. The mirror takes and acknowledges commands
	// as always; they shape no frame. On the calibration source the bench
	// simulates every frame as usual, so a loop calibrates against it.
	Prerendered int
}

// IdleExtraProcs is how many Go processors a bench process with IdlePriority
// needs beyond one per CPU: the two SCHED_IDLE threads, when the kernel holds
// them back, must never hold the processors the device streams need. The
// process sets it (stillsky sim does), not the bench: GOMAXPROCS is the
// process's.
const IdleExtraProcs = 2

// Server is the simulated bench behind the Camera and Mirror services: it owns a
// System, advances it frame by frame, streams the slopes and applies the commands.
type Server struct {
	stillskyv1.UnimplementedCameraServiceServer

	scn *scenario.Scenario
	opt Options
	log *slog.Logger

	mu  sync.Mutex // guards sys, cmd, pending and psf
	sys *System
	// calibrationSource is set while the camera looks at its calibration source.
	calibrationSource atomic.Bool
	cmd               []float32 // the command the mirror holds
	// Lockstep commands wait here until the frame that must see them: the command
	// answering frame j shapes frame j+DelayFrames, exactly.
	pending [pendingRing]pendingCommand
	psf     []float64 // the newest sampled science PSF

	cam     frameRing     // frames between the bench's clock and the camera stream
	frames  *FrameSet     // the pre-rendered frames, nil when simulating every one
	sky     atomic.Bool   // the sky is selected (not the calibration source)
	mir     commandLog    // commands as the mirror stream received them
	sci     scienceCamera // the free-running science camera
	stats   statsAccumulator
	metrics *benchMetrics
	gate    skyGate // with Options.Gated
	// tt is the natural-star tip-tilt sensor and the tip-tilt mirror, nil
	// when the scenario has no tip_tilt section.
	tt *tipTiltDevices
	px *pixelCamera // pixel mode (wfs.pixels), nil for a slope camera
}

// NewServer builds the bench for scenario s.
func NewServer(s *scenario.Scenario, opt Options) (*Server, error) {
	if opt.DelayFrames == 0 {
		opt.DelayFrames = s.Loop.DelayFrames
	}
	if opt.DelayFrames < 1 || opt.DelayFrames >= pendingRing {
		return nil, fmt.Errorf("bench: delay frames %d: must be in [1, %d)", opt.DelayFrames, pendingRing)
	}
	if opt.StrehlEvery == 0 {
		opt.StrehlEvery = 10
	}
	if opt.StrehlEvery < 1 {
		return nil, fmt.Errorf("bench: strehl every %d frames: must be >= 1", opt.StrehlEvery)
	}
	if opt.LockstepTimeout == 0 {
		opt.LockstepTimeout = time.Second
	}
	if opt.Logger == nil {
		opt.Logger = slog.New(slog.DiscardHandler)
	}
	if opt.Gated && !opt.Lockstep {
		return nil, fmt.Errorf("bench: a gated bench must be lockstep")
	}
	if opt.Prerendered < 0 || opt.Prerendered > 0 && opt.Lockstep {
		return nil, fmt.Errorf("bench: %d pre-rendered frames: want 0, or more for a free-running camera", opt.Prerendered)
	}
	sys, err := NewSystem(s)
	if err != nil {
		return nil, err
	}
	px, err := newPixelCamera(s, sys)
	if err != nil {
		return nil, err
	}
	if px != nil {
		sys.SetNoise(false) // the detector draws the noise
	}
	b := &Server{
		px:      px,
		scn:     s,
		opt:     opt,
		log:     opt.Logger,
		sys:     sys,
		cmd:     make([]float32, sys.NumActuators()),
		metrics: newBenchMetrics(s.Science.Wavelength, sys.FramePeriod()),
	}
	b.mir.arrived = make(chan struct{}, 1)
	b.cam.ready = make(chan uint64, ringSize-2)
	b.cam.scratch.slopes = make([]float32, sys.NumSlopes())
	b.cam.scratch.flux = make([]float32, sys.Sensor().NumValid())
	n := sys.PSFSize() * sys.PSFSize()
	b.psf = make([]float64, n)
	b.sci.psf = make([]float64, n)
	b.sci.in = make([]float64, len(sys.Residual()))
	b.sci.wake = make(chan struct{}, 1)
	if b.sci.imager, err = optics.NewImager(sys.Pupil(), s.Science.Wavelength, sys.PSFSize()/sys.Pupil().N); err != nil {
		return nil, err
	}
	b.stats.exp.sum = make([]float64, n)
	b.stats.block.sum = make([]float64, n)
	b.stats.blockFrames = max(1, int(s.Loop.FrameRate))
	b.sci.gauge.sum = make([]float64, n)
	b.sci.gaugeSamples = max(1, int(s.Loop.FrameRate)/opt.StrehlEvery)
	for i := range b.pending {
		b.pending[i].values = make([]float32, sys.NumActuators())
	}
	for i := range b.mir.history {
		b.mir.history[i].values = make([]float32, sys.NumActuators())
	}
	for i := range b.cam.slots {
		b.cam.slots[i].slopes = make([]float32, sys.NumSlopes())
		b.cam.slots[i].flux = make([]float32, sys.Sensor().NumValid())
		if px != nil {
			b.cam.slots[i].pixels = make([]byte, px.bytes())
		}
	}
	b.sky.Store(true)
	b.gate.wake = make(chan struct{}, 1)
	if opt.Prerendered > 0 {
		b.frames = prerender(sys, px, opt.Prerendered)
	}
	if s.TipTilt != nil {
		if b.tt, err = newTipTiltDevices(b); err != nil {
			return nil, err
		}
	}
	return b, nil
}

// Scenario returns the scenario the bench simulates.
func (b *Server) Scenario() *scenario.Scenario { return b.scn }
