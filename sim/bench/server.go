package bench

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"math"
	"runtime"
	"sync"
	"sync/atomic"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/promauto"
	"golang.org/x/sys/unix"
	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	"stillsky/internal/buildinfo"
	"stillsky/internal/monoclock"
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
	// Logger receives the bench's log lines; nil discards them.
	Logger *slog.Logger
	// IdlePriority runs the free-running simulation and the science camera on
	// threads of their own under SCHED_IDLE, so that on a machine shared with
	// the loop they take only the CPU time nothing else wants and never delay a
	// frame's delivery or a command's arrival. It raises GOMAXPROCS by two, so
	// that those threads, when the kernel holds them back, never hold the Go
	// processors the device streams need. For a process of the bench's own.
	IdlePriority bool
}

// ringSize is the number of frames buffered between the bench's clock and the
// camera stream; a consumer that falls further behind loses frames.
const ringSize = 8

// pendingRing holds lockstep commands in flight; it must exceed any delay.
const pendingRing = 64

type pendingCommand struct {
	frame  uint64
	values []float32
}

type frameSlot struct {
	number uint64
	due    int64 // free-run: the readout tick, when the frame may leave
	slopes []float32
}

// historyRing holds the newest free-run commands with their arrival times.
const historyRing = 16

type timedCommand struct {
	at     int64 // CLOCK_MONOTONIC ns of arrival
	values []float32
}

// Server is the simulated bench behind the Camera and Mirror services: it owns a
// System, advances it frame by frame, streams the slopes and applies the commands.
type Server struct {
	stillskyv1.UnimplementedCameraServiceServer

	scn *scenario.Scenario
	opt Options
	log *slog.Logger

	mu  sync.Mutex // guards sys and cmd
	sys *System
	cmd []float32 // the command the mirror holds

	// Free-running, a frame sees the command in place at the readout before
	// it: the mirror stream logs each command with its arrival time, and the
	// simulation picks from the log, however late it runs.
	histMu   sync.Mutex
	history  [historyRing]timedCommand
	received uint64 // commands logged; the next goes to received%historyRing

	// Lockstep hand-off: the newest command's frame number, and a wake-up.
	lastCmdFrame atomic.Uint64
	cmdArrived   chan struct{}
	// Lockstep commands wait here until the frame that must see them: the command
	// answering frame j shapes frame j+DelayFrames, exactly. Guarded by mu.
	pending [pendingRing]pendingCommand

	slots      [ringSize]frameSlot
	scratch    frameSlot   // a frame nobody will read
	ready      chan uint64 // sequence numbers of filled slots
	cameraBusy atomic.Bool
	mirrorBusy atomic.Bool
	written    uint64 // slots filled so far; the next goes to written%ringSize

	psf          []float64 // the newest sampled science PSF; guarded by mu
	sci          *optics.Imager
	sciIn        []float64 // residual handed to the science camera (free-run)
	sciPSF       []float64
	sciBusy      atomic.Bool
	sciWake      chan struct{}
	stats        statsAccumulator
	gauge        exposure // the last second's exposure, for the Strehl gauge
	gaugeSamples int
	lastStrehl   atomic.Uint64 // float64 bits of the last gauge value
	metrics      *benchMetrics
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
	sys, err := NewSystem(s)
	if err != nil {
		return nil, err
	}
	b := &Server{
		scn:        s,
		opt:        opt,
		log:        opt.Logger,
		sys:        sys,
		cmd:        make([]float32, sys.NumActuators()),
		cmdArrived: make(chan struct{}, 1),
		ready:      make(chan uint64, ringSize-2),
		metrics:    newBenchMetrics(s.Science.Wavelength, sys.FramePeriod()),
	}
	b.scratch.slopes = make([]float32, sys.NumSlopes())
	n := sys.PSFSize() * sys.PSFSize()
	b.psf = make([]float64, n)
	b.sciPSF = make([]float64, n)
	b.sciIn = make([]float64, len(sys.Residual()))
	b.sciWake = make(chan struct{}, 1)
	if b.sci, err = optics.NewImager(sys.Pupil(), s.Science.Wavelength, sys.PSFSize()/sys.Pupil().N); err != nil {
		return nil, err
	}
	b.stats.exp.sum = make([]float64, n)
	b.gauge.sum = make([]float64, n)
	b.gaugeSamples = max(1, int(s.Loop.FrameRate)/opt.StrehlEvery)
	for i := range b.pending {
		b.pending[i].values = make([]float32, sys.NumActuators())
	}
	for i := range b.history {
		b.history[i].values = make([]float32, sys.NumActuators())
	}
	for i := range b.slots {
		b.slots[i].slopes = make([]float32, sys.NumSlopes())
	}
	return b, nil
}

// RegisterCamera adds the Camera service to g. Camera and mirror may share one
// server or each have its own listener, as separate devices would.
func (b *Server) RegisterCamera(g *grpc.Server) { stillskyv1.RegisterCameraServiceServer(g, b) }

// RegisterMirror adds the Mirror service to g.
func (b *Server) RegisterMirror(g *grpc.Server) {
	stillskyv1.RegisterMirrorServiceServer(g, mirrorService{b: b})
}

// mirrorService is the bench's Mirror service; it is a separate type because both
// services have a Describe method.
type mirrorService struct {
	stillskyv1.UnimplementedMirrorServiceServer
	b *Server
}

// Describe returns the actuator layout and stroke.
func (m mirrorService) Describe(context.Context, *stillskyv1.MirrorServiceDescribeRequest) (*stillskyv1.MirrorServiceDescribeResponse, error) {
	return m.b.describeMirror(), nil
}

// StreamCommands applies and acknowledges each command.
func (m mirrorService) StreamCommands(stream grpc.BidiStreamingServer[stillskyv1.StreamCommandsRequest, stillskyv1.StreamCommandsResponse]) error {
	return m.b.streamCommands(stream)
}

// Registry returns the bench's own Prometheus registry: what only the simulator
// knows (true residual, true Strehl) and its frame counters.
func (b *Server) Registry() *prometheus.Registry { return b.metrics.reg }

// Scenario returns the scenario the bench simulates.
func (b *Server) Scenario() *scenario.Scenario { return b.scn }

// Run keeps the bench's time until ctx ends: in free-run mode a frame every frame
// period, in lockstep mode a frame whenever the loop has answered.
func (b *Server) Run(ctx context.Context) error {
	sctx, stop := context.WithCancel(ctx)
	defer stop()
	if b.opt.IdlePriority {
		runtime.GOMAXPROCS(runtime.GOMAXPROCS(0) + 2)
	}
	go b.science(sctx)
	if !b.opt.Lockstep {
		b.freeRun(ctx)
		return nil
	}
	for k := uint64(1); ctx.Err() == nil; k++ {
		if err := b.awaitCommand(ctx, k); err != nil {
			return err
		}
		b.produce(k)
	}
	return nil
}

// freeRun is the free-running camera. Frame k is read out at tick k of the
// camera's clock and sees the mirror as it was at tick k−1 — the command that
// arrived last before that tick — which makes the loop delay exactly what the
// scenario's rate and the loop's latency make it, whenever this goroutine gets
// the CPU. The part of a frame that does not depend on the mirror (turbulence,
// the atmosphere's slopes, noise) is done one frame ahead; after tick k−1 only
// the mirror's part is added, and the frame waits in the ring for the camera
// stream, which sends it at tick k. The figures of merit come last.
func (b *Server) freeRun(ctx context.Context) {
	if b.opt.IdlePriority {
		runtime.LockOSThread()
		if err := idleThread(); err != nil {
			b.log.Warn("simulation thread stays at normal priority", "err", err)
		}
	}
	period := int64(b.sys.FramePeriod() * 1e9)
	cmd := make([]float32, len(b.cmd))
	b.mu.Lock()
	b.sys.Advance()
	b.mu.Unlock()
	tick := monoclock.Now()
	for k := uint64(1); ctx.Err() == nil; k++ {
		prev := tick
		tick += period
		if late := monoclock.Now() - tick; late > 10*period {
			// Far behind (an overloaded machine): resynchronise instead of bursting.
			tick = monoclock.Now()
		}
		b.commandAt(prev, cmd)
		slot, publish := b.nextSlot()
		b.mu.Lock()
		b.sys.Observe(cmd, slot.slopes)
		b.mu.Unlock()
		if publish {
			slot.number, slot.due = k, tick
			b.ready <- b.written
			b.written++
		}
		b.figures(k)
		b.mu.Lock()
		b.sys.Advance()
		b.mu.Unlock()
		sleepUntil(tick)
	}
}

// commandAt copies into cmd the newest logged command that arrived at or
// before t (the mirror's rest shape, zero, before any).
func (b *Server) commandAt(t int64, cmd []float32) {
	b.histMu.Lock()
	defer b.histMu.Unlock()
	for j := b.received; j > 0 && j+historyRing > b.received; j-- {
		if e := &b.history[(j-1)%historyRing]; e.at <= t {
			copy(cmd, e.values)
			return
		}
	}
	if b.received == 0 {
		clear(cmd)
		return
	}
	// Every logged command is newer than t (a client flooding the mirror):
	// the oldest kept is the nearest.
	copy(cmd, b.history[b.received%historyRing].values)
}

// logCommand records a free-run command that arrived at time at.
func (b *Server) logCommand(at int64, v []float32) {
	b.histMu.Lock()
	e := &b.history[b.received%historyRing]
	e.at = at
	copy(e.values, v)
	b.received++
	b.histMu.Unlock()
}

// nextSlot returns the slot the next frame goes to and whether it will be
// handed to the camera stream: not when no consumer is connected, nor when the
// consumer has fallen a ring behind (the frame is lost and counted).
func (b *Server) nextSlot() (*frameSlot, bool) {
	// Slots are filled in sequence, whatever frames were lost. Only the producer
	// writes them, and len(b.ready) only shrinks concurrently: a free place in the
	// channel means the consumer holds at most the slot ringSize−1 writes back,
	// never the next one.
	if !b.cameraBusy.Load() {
		return &b.scratch, false
	}
	if len(b.ready) == cap(b.ready) {
		b.metrics.framesLost.Inc()
		return &b.scratch, false
	}
	return &b.slots[b.written%ringSize], true
}

// figures updates the true figures of merit after frame k. Free-running, the
// residual is formed on the frames the science camera samples only: on the
// others the geometric sensor never needs it.
func (b *Server) figures(k uint64) {
	b.metrics.frames.Inc()
	sample := k%uint64(b.opt.StrehlEvery) == 0
	if !sample && !b.opt.Lockstep {
		return
	}
	b.mu.Lock()
	rms := b.sys.ResidualRMS()
	async := sample && !b.opt.Lockstep && b.sciBusy.CompareAndSwap(false, true)
	if async {
		// Free-running, the science camera works on its own goroutine, so that
		// its FFT never delays the wavefront sensor's frames.
		copy(b.sciIn, b.sys.Residual())
		b.sciWake <- struct{}{}
	}
	if sample && b.opt.Lockstep {
		// Lockstep runs are reproducible: every sampled frame is exposed.
		b.sys.PSF(b.psf)
	}
	b.mu.Unlock()
	b.stats.add(rms)
	b.metrics.residual.Set(rms)
	if sample && b.opt.Lockstep {
		b.expose(b.psf)
	}
}

// awaitCommand blocks, in lockstep mode, until the command for frame k−d has
// arrived (or the timeout passes, or no camera consumer is connected).
func (b *Server) awaitCommand(ctx context.Context, k uint64) error {
	d := uint64(b.opt.DelayFrames)
	for !b.cameraBusy.Load() {
		select {
		case <-ctx.Done():
			return ctx.Err()
		case <-time.After(10 * time.Millisecond):
		}
	}
	if k <= d {
		return nil
	}
	deadline := time.NewTimer(b.opt.LockstepTimeout)
	defer deadline.Stop()
	for b.lastCmdFrame.Load() < k-d {
		select {
		case <-ctx.Done():
			return ctx.Err()
		case <-b.cmdArrived:
		case <-deadline.C:
			b.metrics.lockstepTimeouts.Inc()
			return nil
		}
	}
	return nil
}

// produce simulates lockstep frame k with the command that answered frame
// k−DelayFrames and hands it to the camera stream at once.
func (b *Server) produce(k uint64) {
	slot, publish := b.nextSlot()
	b.mu.Lock()
	if d := uint64(b.opt.DelayFrames); k > d {
		if p := &b.pending[(k-d)%pendingRing]; p.frame == k-d {
			copy(b.cmd, p.values)
			b.sys.SetCommand(b.cmd)
		}
	}
	b.sys.Frame(slot.slopes)
	b.mu.Unlock()
	if publish {
		slot.number, slot.due = k, 0
		b.ready <- b.written
		b.written++
	}
	b.figures(k)
}

// expose adds a science PSF to the window's exposure and the gauge's.
func (b *Server) expose(psf []float64) {
	b.stats.expose(psf)
	if b.gauge.add(psf) >= b.gaugeSamples {
		st := b.gauge.strehl()
		b.metrics.strehl.Set(st)
		b.lastStrehl.Store(math.Float64bits(st))
		b.gauge.reset()
	}
}

// science is the free-running science camera: it images the residuals that
// produce hands it, one at a time.
func (b *Server) science(ctx context.Context) {
	if b.opt.IdlePriority {
		runtime.LockOSThread()
		if err := idleThread(); err != nil {
			b.log.Warn("science camera thread stays at normal priority", "err", err)
		}
	}
	for {
		select {
		case <-ctx.Done():
			return
		case <-b.sciWake:
		}
		b.sci.PSF(b.sciIn, b.sciPSF)
		b.expose(b.sciPSF)
		b.mu.Lock()
		copy(b.psf, b.sciPSF)
		b.mu.Unlock()
		b.sciBusy.Store(false)
	}
}

// Describe returns the sensor geometry.
func (b *Server) Describe(context.Context, *stillskyv1.CameraServiceDescribeRequest) (*stillskyv1.CameraServiceDescribeResponse, error) {
	wfs := b.sys.Sensor()
	valid := wfs.Valid()
	idx := make([]uint32, 0, wfs.NumValid())
	for i, v := range valid {
		if v {
			idx = append(idx, uint32(i))
		}
	}
	return &stillskyv1.CameraServiceDescribeResponse{
		Subapertures:      uint32(b.scn.WFS.Subapertures),
		ValidSubapertures: idx,
		SlopeCount:        uint32(b.sys.NumSlopes()),
		FrameRateHz:       b.scn.Loop.FrameRate,
		SubapertureSizeM:  b.scn.Telescope.Diameter / float64(b.scn.WFS.Subapertures),
		PupilDiameterM:    b.scn.Telescope.Diameter,
		WavelengthM:       b.scn.GuideStar.Wavelength,
		SlopeUnit:         "rad",
		Lockstep:          b.opt.Lockstep,
		DelayFrames:       uint32(b.opt.DelayFrames),
		Description:       b.scn.Name + ": " + b.scn.Description,
	}, nil
}

// StreamFrames streams the frames to one consumer at a time.
func (b *Server) StreamFrames(req *stillskyv1.StreamFramesRequest, stream grpc.ServerStreamingServer[stillskyv1.StreamFramesResponse]) error {
	rows, err := b.chunkRows(req.GetChunks())
	if err != nil {
		return err
	}
	if !b.cameraBusy.CompareAndSwap(false, true) {
		return status.Error(codes.ResourceExhausted, "camera: another client holds the frame stream")
	}
	defer b.cameraBusy.Store(false)
	// Frames queued for a previous consumer are stale.
	for len(b.ready) > 0 {
		<-b.ready
	}
	msg := &stillskyv1.StreamFramesResponse{}
	ctx := stream.Context()
	for {
		select {
		case <-ctx.Done():
			return nil
		case seq := <-b.ready:
			slot := &b.slots[seq%ringSize]
			// Free-running, the frame is read out at its tick, and that is its
			// stamp even when this goroutine gets the CPU late: the delay of a
			// late send is the link's, and the loop sees it. Lockstep frames are
			// read out when produced.
			start := slot.due
			if start != 0 {
				waitUntil(start)
			} else {
				start = monoclock.Now()
			}
			msg.FrameNumber = slot.number
			msg.ChunkCount = uint32(len(rows))
			for c, r := range rows {
				msg.ChunkIndex = uint32(c)
				msg.Offset = uint32(r[0])
				msg.Slopes = slot.slopes[r[0]:r[1]]
				msg.ReadoutEndNs = start + int64(b.opt.ReadoutTime)*int64(c)/int64(len(rows))
				if c > 0 && b.opt.ReadoutTime > 0 {
					waitUntil(msg.ReadoutEndNs)
				}
				if err := stream.Send(msg); err != nil {
					return err
				}
			}
			// Send only queues the frame for the transport's writer goroutine;
			// let it run now on this thread rather than after the next wait,
			// which may be a system call that keeps the thread's processor.
			runtime.Gosched()
		}
	}
}

// SetSource switches between the sky and the calibration source.
func (b *Server) SetSource(_ context.Context, req *stillskyv1.SetSourceRequest) (*stillskyv1.SetSourceResponse, error) {
	var sky bool
	switch req.GetSource() {
	case stillskyv1.Source_SOURCE_SKY:
		sky = true
	case stillskyv1.Source_SOURCE_CALIBRATION:
	default:
		return nil, status.Errorf(codes.InvalidArgument, "camera: source %v: want SOURCE_SKY or SOURCE_CALIBRATION", req.GetSource())
	}
	b.mu.Lock()
	b.sys.SetTurbulence(sky)
	b.sys.SetNoise(sky && b.scn.WFS.Noise)
	b.mu.Unlock()
	b.log.Info("source selected", "source", req.GetSource().String())
	return &stillskyv1.SetSourceResponse{Source: req.GetSource()}, nil
}

// waitUntil blocks until CLOCK_MONOTONIC reaches t: an absolute clock_nanosleep
// for the bulk, then a short spin. Go's own timers wake through the network
// poller, whose waits are whole milliseconds: measured here, a 700 µs
// time.Sleep overslept by 410 µs at the median, clock_nanosleep by 87 µs.
func waitUntil(t int64) {
	const spin = 100 * time.Microsecond
	if monoclock.Now() < t-int64(spin) {
		sleepUntil(t - int64(spin))
	}
	for monoclock.Now() < t {
	}
}

// sleepUntil blocks until CLOCK_MONOTONIC reaches t, without the spin of
// waitUntil: for a thread whose wake-up may be late but never early.
func sleepUntil(t int64) {
	ts := unix.NsecToTimespec(t)
	for unix.ClockNanosleep(unix.CLOCK_MONOTONIC, unix.TIMER_ABSTIME, &ts, nil) == unix.EINTR {
	}
}

// idleThread puts the calling thread under SCHED_IDLE: it runs only when a
// CPU has nothing else to do, and any other thread that wakes preempts it.
// Lowering one's own policy needs no privilege.
func idleThread() error {
	attr := unix.SchedAttr{Size: unix.SizeofSchedAttr, Policy: unix.SCHED_IDLE}
	return unix.SchedSetAttr(0, &attr, 0)
}

// chunkRows splits the slope vector into n groups of whole subaperture rows, as
// [start, end) slope index ranges in readout order.
func (b *Server) chunkRows(n uint32) ([][2]int, error) {
	nsub := b.scn.WFS.Subapertures
	if n <= 1 {
		return [][2]int{{0, b.sys.NumSlopes()}}, nil
	}
	if int(n) > nsub {
		return nil, status.Errorf(codes.InvalidArgument, "camera: %d chunks: must be at most the %d subaperture rows", n, nsub)
	}
	// Slopes before each subaperture row.
	valid := b.sys.Sensor().Valid()
	rowStart := make([]int, nsub+1)
	for r := 0; r < nsub; r++ {
		cnt := 0
		for c := 0; c < nsub; c++ {
			if valid[r*nsub+c] {
				cnt += 2
			}
		}
		rowStart[r+1] = rowStart[r] + cnt
	}
	out := make([][2]int, 0, n)
	for c := 0; c < int(n); c++ {
		r0, r1 := c*nsub/int(n), (c+1)*nsub/int(n)
		if rowStart[r1] == rowStart[r0] {
			return nil, status.Errorf(codes.InvalidArgument, "camera: %d chunks: chunk %d has no valid subaperture", n, c)
		}
		out = append(out, [2]int{rowStart[r0], rowStart[r1]})
	}
	return out, nil
}

func (b *Server) describeMirror() *stillskyv1.MirrorServiceDescribeResponse {
	m := b.sys.Mirror()
	pos := m.Positions()
	flat := make([]float64, 0, 2*len(pos))
	for _, p := range pos {
		flat = append(flat, p[0], p[1])
	}
	return &stillskyv1.MirrorServiceDescribeResponse{
		ActuatorCount:   uint32(m.NumValid()),
		ActuatorsAcross: uint32(b.scn.DM.Actuators),
		PositionsM:      flat,
		PitchM:          b.scn.Telescope.Diameter / float64(b.scn.DM.Actuators-1),
		StrokeM:         m.Stroke(),
		CommandUnit:     "m",
		Coupling:        b.scn.DM.Coupling,
	}
}

func (b *Server) streamCommands(stream grpc.BidiStreamingServer[stillskyv1.StreamCommandsRequest, stillskyv1.StreamCommandsResponse]) error {
	if !b.mirrorBusy.CompareAndSwap(false, true) {
		return status.Error(codes.ResourceExhausted, "mirror: another client drives the mirror")
	}
	defer b.mirrorBusy.Store(false)
	n := len(b.cmd)
	stroke := float32(b.sys.Mirror().Stroke())
	req := &stillskyv1.StreamCommandsRequest{}
	ack := &stillskyv1.StreamCommandsResponse{}
	for {
		if err := stream.RecvMsg(req); err != nil {
			if errors.Is(err, context.Canceled) || status.Code(err) == codes.Canceled {
				return nil
			}
			return err
		}
		received := monoclock.Now()
		v := req.GetValues()
		if len(v) != n {
			b.metrics.commandsRejected.Inc()
			return status.Errorf(codes.InvalidArgument, "mirror: command for frame %d has %d values, want %d", req.GetFrameNumber(), len(v), n)
		}
		clipped := uint32(0)
		for i, x := range v {
			if math.IsNaN(float64(x)) || math.IsInf(float64(x), 0) {
				b.metrics.commandsRejected.Inc()
				return status.Errorf(codes.InvalidArgument, "mirror: command for frame %d: value %d is %v", req.GetFrameNumber(), i, x)
			}
			if x > stroke || x < -stroke {
				clipped++
			}
		}
		if f := req.GetFrameNumber(); b.opt.Lockstep && f != 0 {
			b.mu.Lock()
			p := &b.pending[f%pendingRing]
			p.frame = f
			copy(p.values, v)
			b.mu.Unlock()
		} else if b.opt.Lockstep {
			b.mu.Lock()
			copy(b.cmd, v)
			b.sys.SetCommand(b.cmd)
			b.mu.Unlock()
		} else {
			b.logCommand(received, v)
		}
		if f := req.GetFrameNumber(); f > b.lastCmdFrame.Load() {
			b.lastCmdFrame.Store(f)
		}
		select {
		case b.cmdArrived <- struct{}{}:
		default:
		}
		b.metrics.commands.Inc()
		ack.FrameNumber, ack.ReceivedNs, ack.Clipped = req.GetFrameNumber(), received, clipped
		if err := stream.Send(ack); err != nil {
			return err
		}
	}
}

// Stats are the bench's true figures of merit since the last ResetStats.
type Stats struct {
	Frames int
	// ResidualRMS is the mean over frames of the true residual OPD rms, metres.
	ResidualRMS float64
	// Strehl is the long-exposure science Strehl ratio: the peak of the PSF
	// averaged over the sampled frames, over the diffraction-limited peak. It is
	// what a science camera integrating over the window would measure; single-frame
	// peaks of an uncorrected wavefront are speckles and read far higher.
	Strehl float64
	// StrehlSamples is the number of PSFs in the exposure.
	StrehlSamples int
}

// exposure sums PSFs, as a science camera integrates.
type exposure struct {
	sum []float64
	n   int
}

func (e *exposure) add(psf []float64) int {
	for i, v := range psf {
		e.sum[i] += v
	}
	e.n++
	return e.n
}

// strehl returns the peak of the mean PSF (the diffraction-limited peak is 1).
func (e *exposure) strehl() float64 {
	if e.n == 0 {
		return 0
	}
	peak := 0.0
	for _, v := range e.sum {
		peak = max(peak, v)
	}
	return peak / float64(e.n)
}

func (e *exposure) reset() {
	clear(e.sum)
	e.n = 0
}

type statsAccumulator struct {
	mu           sync.Mutex
	frames       int
	sumResidual  float64
	lastResidual float64
	exp          exposure
}

func (a *statsAccumulator) add(rms float64) {
	a.mu.Lock()
	a.frames++
	a.sumResidual += rms
	a.lastResidual = rms
	a.mu.Unlock()
}

func (a *statsAccumulator) expose(psf []float64) {
	a.mu.Lock()
	a.exp.add(psf)
	a.mu.Unlock()
}

// Latest returns the true residual OPD rms (metres) of the newest frame and the
// Strehl ratio of the last completed one-second exposure.
func (b *Server) Latest() (residualRMS, strehl float64) {
	a := &b.stats
	a.mu.Lock()
	defer a.mu.Unlock()
	return a.lastResidual, math.Float64frombits(b.lastStrehl.Load())
}

// Stats returns the figures since the last ResetStats.
func (b *Server) Stats() Stats {
	a := &b.stats
	a.mu.Lock()
	defer a.mu.Unlock()
	s := Stats{Frames: a.frames, StrehlSamples: a.exp.n, Strehl: a.exp.strehl()}
	if a.frames > 0 {
		s.ResidualRMS = a.sumResidual / float64(a.frames)
	}
	return s
}

// ResetStats starts a new averaging window and science exposure.
func (b *Server) ResetStats() {
	a := &b.stats
	a.mu.Lock()
	a.frames, a.sumResidual = 0, 0
	a.exp.reset()
	a.mu.Unlock()
}

type benchMetrics struct {
	reg                                          *prometheus.Registry
	frames, framesLost, commands                 prometheus.Counter
	commandsRejected, lockstepTimeouts           prometheus.Counter
	residual, strehl, wavelength, framePeriodGau prometheus.Gauge
}

func newBenchMetrics(wavelength, period float64) *benchMetrics {
	m := &benchMetrics{reg: prometheus.NewRegistry()}
	f := promauto.With(m.reg)
	counter := func(name, help string) prometheus.Counter {
		return f.NewCounter(prometheus.CounterOpts{Name: name, Help: help})
	}
	gauge := func(name, help string) prometheus.Gauge {
		return f.NewGauge(prometheus.GaugeOpts{Name: name, Help: help})
	}
	m.frames = counter("stillsky_bench_frames_total", "Frames simulated by the bench.")
	m.framesLost = counter("stillsky_bench_frames_lost_total", "Frames discarded because the camera consumer fell behind.")
	m.commands = counter("stillsky_bench_commands_total", "Mirror commands applied.")
	m.commandsRejected = counter("stillsky_bench_commands_rejected_total", "Mirror commands refused (wrong length or non-finite).")
	m.lockstepTimeouts = counter("stillsky_bench_lockstep_timeouts_total", "Lockstep frames produced without the awaited command.")
	m.residual = gauge("stillsky_bench_residual_wavefront_rms_meters", "True residual optical path rms over the pupil, piston removed.")
	m.strehl = gauge("stillsky_bench_strehl_ratio", "True science Strehl ratio at the science wavelength, from the PSF.")
	m.wavelength = gauge("stillsky_bench_science_wavelength_meters", "Science wavelength of the Strehl ratio.")
	m.framePeriodGau = gauge("stillsky_bench_frame_period_seconds", "Frame period of the simulated camera.")
	m.wavelength.Set(wavelength)
	m.framePeriodGau.Set(period)
	if err := buildinfo.Register(m.reg); err != nil {
		panic(err) // a fresh registry cannot hold a duplicate
	}
	return m
}
