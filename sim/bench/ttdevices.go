package bench

import (
	"context"
	"errors"
	"math"
	"math/rand/v2"
	"sync/atomic"
	"time"

	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	"stillsky/internal/monoclock"
	stillskyv1 "stillsky/proto/stillsky/v1"
	"stillsky/sim/wfs"
)

// ttNoiseStream separates the tip-tilt sensor's noise from the other streams.
const ttNoiseStream = 0x5eed_77

// tipTiltDevices are the bench's natural-star tip-tilt sensor (a quad cell)
// and tip-tilt mirror, served as a second Camera and a second Mirror device
// (scenario section tip_tilt). The quad cell integrates the residual tilt of
// ratio wavefront-sensor frames (what the natural star sees: the science
// direction's residual, both mirrors applied) and reads out once at the end
// of them: tip-tilt frame j ends with wavefront-sensor frame j·ratio.
// Lockstep, the tip-tilt mirror's command answering tip-tilt frame j shapes
// the wavefront-sensor frames from j·ratio + DelayFrames on; free-running, a
// command applies when it arrives.
type tipTiltDevices struct {
	qc    *wfs.QuadCell
	ratio uint64
	rng   *rand.Rand
	// sum and n integrate the residual tilt over the current tip-tilt frame,
	// trans the sky's transmission (the scenario's clouds dim the natural
	// star as they dim the guide star); written by the bench's clock under
	// Server.mu.
	sum   [2]float64
	trans float64
	n     int

	// The camera stream: frames as they are read out, one consumer at a time.
	ready   chan ttFrame
	camBusy atomic.Bool
	// published[j%pendingRing] is j once tip-tilt frame j went to a consumer,
	// so that a lockstep bench waits only for commands a loop can send.
	published [pendingRing]atomic.Uint64

	// The mirror: its stroke (rad), the commands waiting for their frame
	// (lockstep, under Server.mu) and the newest command's frame number.
	stroke    float64
	pending   [pendingRing]ttPending
	mirBusy   atomic.Bool
	lastFrame atomic.Uint64
	arrived   chan struct{}
}

type ttFrame struct {
	number  uint64
	readout int64
	tilt    [2]float32
	flux    float32
}

type ttPending struct {
	frame uint64
	tilt  [2]float64
}

func newTipTiltDevices(b *Server) (*tipTiltDevices, error) {
	s := b.scn
	t := s.TipTilt
	qc, err := wfs.NewQuadCell(wfs.QuadCellConfig{SpotSigma: s.TipTiltSpotSigma(), Photons: s.TipTiltPhotons(), ReadNoise: t.ReadNoise})
	if err != nil {
		return nil, err
	}
	return &tipTiltDevices{
		qc: qc, ratio: uint64(s.TipTiltRatio()),
		rng:     rand.New(rand.NewPCG(uint64(s.Atmosphere.Seed), ttNoiseStream)),
		ready:   make(chan ttFrame, ringSize),
		stroke:  t.Stroke,
		arrived: make(chan struct{}, 1),
	}, nil
}

// integrate adds frame k's residual tilt to the tip-tilt sensor's exposure
// and, at the end of a tip-tilt frame, reads it out through the quad cell
// (with photon and read noise on the sky) and hands it to the camera stream.
// The caller holds b.mu.
func (t *tipTiltDevices) integrate(b *Server, k uint64) {
	tx, ty := b.sys.ResidualTilt()
	t.sum[0] += tx
	t.sum[1] += ty
	t.trans += b.sys.Transmission()
	t.n++
	if k%t.ratio != 0 {
		return
	}
	mx, my := t.sum[0]/float64(t.n), t.sum[1]/float64(t.n)
	t.qc.SetTransmission(t.trans / float64(t.n))
	t.sum, t.trans, t.n = [2]float64{}, 0, 0
	var rng *rand.Rand
	if b.sky.Load() {
		rng = t.rng
	}
	sx, sy := t.qc.Sense(mx, my, rng)
	j := k / t.ratio
	if !t.camBusy.Load() || len(t.ready) == cap(t.ready) {
		return
	}
	t.published[j%pendingRing].Store(j)
	t.ready <- ttFrame{number: j, readout: monoclock.Now(), tilt: [2]float32{float32(sx), float32(sy)}, flux: float32(t.qc.Flux())}
}

// applyPending sets, before lockstep frame k, the tip-tilt command that
// answered tip-tilt frame (k − d)/ratio, when that frame ended d frames ago.
// The caller holds b.mu.
func (t *tipTiltDevices) applyPending(b *Server, k, d uint64) {
	if k <= d || (k-d)%t.ratio != 0 {
		return
	}
	j := (k - d) / t.ratio
	if p := &t.pending[j%pendingRing]; p.frame == j {
		b.sys.SetTipTilt(p.tilt[0], p.tilt[1])
	}
}

// awaitCommand waits, in lockstep mode before frame k, for the tip-tilt
// command whose frame ended d frames before k, if that frame reached a
// consumer and a client drives the mirror; the wait ends at deadline.
func (t *tipTiltDevices) awaitCommand(ctx context.Context, k, d uint64, deadline <-chan time.Time) (timedOut bool, err error) {
	if k <= d || (k-d)%t.ratio != 0 {
		return false, nil
	}
	j := (k - d) / t.ratio
	if t.published[j%pendingRing].Load() != j {
		return false, nil
	}
	for t.mirBusy.Load() && t.lastFrame.Load() < j {
		select {
		case <-ctx.Done():
			return false, ctx.Err()
		case <-t.arrived:
		case <-deadline:
			return true, nil
		}
	}
	return false, nil
}

// RegisterTipTilt adds the tip-tilt sensor's Camera service and the tip-tilt
// mirror's Mirror service to g, a server of their own (both services have the
// same names as the Shack–Hartmann camera's and the deformable mirror's). It
// reports false when the scenario has no tip_tilt section.
func (b *Server) RegisterTipTilt(g *grpc.Server) bool {
	if b.tt == nil {
		return false
	}
	stillskyv1.RegisterCameraServiceServer(g, ttCamera{b: b})
	stillskyv1.RegisterMirrorServiceServer(g, ttMirror{b: b})
	return true
}

// ttCamera is the tip-tilt sensor's Camera service.
type ttCamera struct {
	stillskyv1.UnimplementedCameraServiceServer
	b *Server
}

// Describe returns the quad cell's geometry: one subaperture, the pupil.
func (c ttCamera) Describe(context.Context, *stillskyv1.CameraServiceDescribeRequest) (*stillskyv1.CameraServiceDescribeResponse, error) {
	s := c.b.scn
	return &stillskyv1.CameraServiceDescribeResponse{
		Subapertures:      1,
		ValidSubapertures: []uint32{0},
		SlopeCount:        2,
		FrameRateHz:       s.TipTilt.FrameRate,
		SubapertureSizeM:  s.Telescope.Diameter,
		PupilDiameterM:    s.Telescope.Diameter,
		WavelengthM:       s.TipTilt.Wavelength,
		SlopeUnit:         "rad",
		Lockstep:          c.b.opt.Lockstep,
		DelayFrames:       1,
		Description:       s.Name + ": natural-star tip-tilt sensor (quad cell)",
		ZenithDeg:         s.Atmosphere.ZenithDeg,
		Obstruction:       s.Telescope.Obstruction,
		SensorKind:        stillskyv1.SensorKind_SENSOR_KIND_QUAD_CELL,
		StarMagnitude:     s.TipTilt.Magnitude,
	}, nil
}

// StreamFrames streams the quad cell's tilt frames, whole, to one consumer.
func (c ttCamera) StreamFrames(req *stillskyv1.StreamFramesRequest, stream grpc.ServerStreamingServer[stillskyv1.StreamFramesResponse]) error {
	if req.GetChunks() > 1 {
		return status.Errorf(codes.InvalidArgument, "tip-tilt camera: %d chunks: a quad cell's frame is one chunk", req.GetChunks())
	}
	t := c.b.tt
	if !t.camBusy.CompareAndSwap(false, true) {
		return status.Error(codes.ResourceExhausted, "tip-tilt camera: another client holds the frame stream")
	}
	defer t.camBusy.Store(false)
	for len(t.ready) > 0 {
		<-t.ready
	}
	msg := &stillskyv1.StreamFramesResponse{ChunkCount: 1, Slopes: make([]float32, 2)}
	ctx := stream.Context()
	for {
		select {
		case <-ctx.Done():
			return nil
		case f := <-t.ready:
			msg.FrameNumber, msg.ReadoutEndNs = f.number, f.readout
			msg.Slopes[0], msg.Slopes[1] = f.tilt[0], f.tilt[1]
			msg.FluxElectrons = f.flux
			if err := stream.Send(msg); err != nil {
				return err
			}
		}
	}
}

// ttMirror is the tip-tilt mirror's Mirror service.
type ttMirror struct {
	stillskyv1.UnimplementedMirrorServiceServer
	b *Server
}

// Describe returns the tip-tilt mirror: two axes, its stroke in radians.
func (m ttMirror) Describe(context.Context, *stillskyv1.MirrorServiceDescribeRequest) (*stillskyv1.MirrorServiceDescribeResponse, error) {
	return &stillskyv1.MirrorServiceDescribeResponse{
		ActuatorCount:   2,
		CommandUnit:     "rad",
		ProtocolVersion: mirrorProtocol,
		MirrorKind:      stillskyv1.MirrorKind_MIRROR_KIND_TIP_TILT,
		StrokeRad:       m.b.tt.stroke,
	}, nil
}

// StreamCommands applies each tilt command, clipped to ±stroke, and
// acknowledges it as the deformable mirror does (ack_batch honoured).
func (m ttMirror) StreamCommands(stream grpc.BidiStreamingServer[stillskyv1.StreamCommandsRequest, stillskyv1.StreamCommandsResponse]) error {
	b, t := m.b, m.b.tt
	if !t.mirBusy.CompareAndSwap(false, true) {
		return status.Error(codes.ResourceExhausted, "tip-tilt mirror: another client drives the mirror")
	}
	defer t.mirBusy.Store(false)
	req := &stillskyv1.StreamCommandsRequest{}
	acks := newAckBatcher()
	for {
		if err := stream.RecvMsg(req); err != nil {
			if errors.Is(err, context.Canceled) || status.Code(err) == codes.Canceled {
				return nil
			}
			return err
		}
		received := monoclock.Now()
		v := req.GetValues()
		clipped, err := checkCommand(req.GetFrameNumber(), v, 2, float32(t.stroke))
		if err != nil {
			b.metrics.commandsRejected.Inc()
			return status.Errorf(codes.InvalidArgument, "tip-tilt %s", status.Convert(err).Message())
		}
		tilt := [2]float64{clip(float64(v[0]), t.stroke), clip(float64(v[1]), t.stroke)}
		f := req.GetFrameNumber()
		b.mu.Lock()
		if b.opt.Lockstep && f != 0 {
			t.pending[f%pendingRing] = ttPending{frame: f, tilt: tilt}
		} else {
			b.sys.SetTipTilt(tilt[0], tilt[1])
		}
		b.mu.Unlock()
		if f > t.lastFrame.Load() {
			t.lastFrame.Store(f)
		}
		select {
		case t.arrived <- struct{}{}:
		default:
		}
		b.metrics.ttCommands.Inc()
		if err := acks.add(stream, req, received, clipped); err != nil {
			return err
		}
	}
}

func clip(v, s float64) float64 { return math.Max(-s, math.Min(s, v)) }
