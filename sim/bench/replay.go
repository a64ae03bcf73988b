package bench

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"runtime"
	"sync/atomic"

	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"
	"google.golang.org/protobuf/proto"

	"stillsky/internal/monoclock"
	"stillsky/internal/recording"
	"stillsky/internal/rpc"
	stillskyv1 "stillsky/proto/stillsky/v1"
)

// Replay serves a telemetry recording as devices: a free-running Camera that
// sends the recorded slopes at the recorded frame rate, from the first frame to
// the last and over again (a FrameSet, as the bench's pre-rendered camera), and a Mirror that checks, acknowledges and counts the
// commands it gets (they change nothing: the slopes are the recording's). It
// simulates nothing, so a latency benchmark against it measures the loop and the
// transport with almost no simulator beside them.
type Replay struct {
	stillskyv1.UnimplementedCameraServiceServer

	rec    *recording.Recording
	frames *FrameSet // the recorded slopes
	name   string
	log    *slog.Logger
	period int64 // ns

	camBusy, mirBusy atomic.Bool
	paused           atomic.Bool // acquisition stopped
	commands         atomic.Uint64
}

// NewReplay prepares the replay of rec; name (the file's) appears in the
// camera's description.
func NewReplay(rec *recording.Recording, name string, log *slog.Logger) (*Replay, error) {
	if rec.Frames < 1 {
		return nil, fmt.Errorf("replay %s: the recording holds no frame", name)
	}
	if log == nil {
		log = slog.New(slog.DiscardHandler)
	}
	frames, err := NewFrameSet(rec.Slopes, int(rec.Camera.GetSlopeCount()))
	if err != nil {
		return nil, fmt.Errorf("replay %s: %w", name, err)
	}
	return &Replay{rec: rec, frames: frames, name: name, log: log, period: int64(1e9 / rec.Camera.GetFrameRateHz())}, nil
}

// Commands returns the number of commands the mirror has accepted.
func (r *Replay) Commands() uint64 { return r.commands.Load() }

// Describe returns the recorded sensor's geometry, free-running.
func (r *Replay) Describe(context.Context, *stillskyv1.CameraServiceDescribeRequest) (*stillskyv1.CameraServiceDescribeResponse, error) {
	d := proto.Clone(r.rec.Camera).(*stillskyv1.CameraServiceDescribeResponse)
	d.Lockstep = false
	d.Description = fmt.Sprintf("replay of %s (%d frames): %s", r.name, r.rec.Frames, r.rec.Camera.GetDescription())
	return d, nil
}

// SetSource is refused: a recording has no calibration source, and a
// calibration against it would measure nothing (load the recording's
// reconstructor instead).
func (r *Replay) SetSource(context.Context, *stillskyv1.SetSourceRequest) (*stillskyv1.SetSourceResponse, error) {
	return nil, status.Error(codes.Unimplemented, "replay camera: no calibration source")
}

// SetAcquisition pauses or resumes the frame stream: paused, the clock and
// the frame numbers run on, and no frame is sent.
func (r *Replay) SetAcquisition(_ context.Context, req *stillskyv1.SetAcquisitionRequest) (*stillskyv1.SetAcquisitionResponse, error) {
	r.paused.Store(req.GetPaused())
	return &stillskyv1.SetAcquisitionResponse{Paused: req.GetPaused()}, nil
}

// StreamFrames sends the recorded frames, whole, one per period of the recorded
// frame rate, stamped with the tick they are read out at, looping at the end.
func (r *Replay) StreamFrames(req *stillskyv1.StreamFramesRequest, stream grpc.ServerStreamingServer[stillskyv1.StreamFramesResponse]) error {
	if req.GetChunks() > 1 {
		return status.Errorf(codes.InvalidArgument, "replay camera: %d chunks: it sends whole frames only", req.GetChunks())
	}
	if !r.camBusy.CompareAndSwap(false, true) {
		return status.Error(codes.ResourceExhausted, "camera: another client holds the frame stream")
	}
	defer r.camBusy.Store(false)
	msg := &stillskyv1.StreamFramesResponse{ChunkCount: 1}
	ctx := stream.Context()
	tick := monoclock.Now()
	for k := uint64(1); ctx.Err() == nil; k++ {
		tick += r.period
		if monoclock.Now()-tick > 10*r.period {
			// Far behind (an overloaded machine): resynchronise instead of bursting.
			tick = monoclock.Now()
		}
		waitUntil(tick)
		if r.paused.Load() {
			continue
		}
		msg.FrameNumber, msg.ReadoutEndNs = k, tick
		msg.Slopes = r.frames.Frame(k)
		if err := stream.Send(msg); err != nil {
			return err
		}
		// As the bench's camera: let the transport's writer run now.
		runtime.Gosched()
	}
	return nil
}

// replayMirror is the replay's Mirror service.
type replayMirror struct {
	stillskyv1.UnimplementedMirrorServiceServer
	r *Replay
}

// Describe returns the recorded mirror's layout, and the protocol this
// mirror speaks (whichever the recorded one spoke).
func (m replayMirror) Describe(context.Context, *stillskyv1.MirrorServiceDescribeRequest) (*stillskyv1.MirrorServiceDescribeResponse, error) {
	d := proto.Clone(m.r.rec.Mirror).(*stillskyv1.MirrorServiceDescribeResponse)
	d.ProtocolVersion = mirrorProtocol
	return d, nil
}

// StreamCommands checks and acknowledges each command, one by one or in the
// batches the client asks for, as the bench's mirror does.
func (m replayMirror) StreamCommands(stream grpc.BidiStreamingServer[stillskyv1.StreamCommandsRequest, stillskyv1.StreamCommandsResponse]) error {
	r := m.r
	if !r.mirBusy.CompareAndSwap(false, true) {
		return status.Error(codes.ResourceExhausted, "mirror: another client drives the mirror")
	}
	defer r.mirBusy.Store(false)
	n, stroke := int(r.rec.Mirror.GetActuatorCount()), float32(r.rec.Mirror.GetStrokeM())
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
		clipped, err := checkCommand(req.GetFrameNumber(), req.GetValues(), n, stroke)
		if err != nil {
			return err
		}
		r.commands.Add(1)
		if err := acks.add(stream, req, received, clipped); err != nil {
			return err
		}
	}
}

// Serve serves the replay's camera (with the transport probe beside it) and
// mirror on l until ctx ends; l.Mirror nil puts both on the camera's server.
// The replay has no metrics endpoint.
func (r *Replay) Serve(ctx context.Context, l *Listeners) error {
	camSvc := stillskyv1.CameraService_ServiceDesc.ServiceName
	mirSvc := stillskyv1.MirrorService_ServiceDesc.ServiceName
	probeSvc := stillskyv1.TransportProbeService_ServiceDesc.ServiceName
	errc := make(chan error, 2)
	services := []string{camSvc, probeSvc}
	if l.Mirror == nil {
		services = append(services, mirSvc)
	}
	gc, _ := rpc.NewServer(services, rpc.DeviceServerOptions()...)
	stillskyv1.RegisterCameraServiceServer(gc, r)
	RegisterProbe(gc)
	servers := []*grpc.Server{gc}
	if l.Mirror == nil {
		stillskyv1.RegisterMirrorServiceServer(gc, replayMirror{r: r})
	} else {
		gm, _ := rpc.NewServer([]string{mirSvc}, rpc.DeviceServerOptions()...)
		stillskyv1.RegisterMirrorServiceServer(gm, replayMirror{r: r})
		servers = append(servers, gm)
		go func() { errc <- gm.Serve(l.Mirror) }()
	}
	go func() { errc <- gc.Serve(l.Camera) }()
	if l.Metrics != nil {
		l.Metrics.Close()
	}
	r.log.Info("replay serving", "file", r.name, "frames", r.rec.Frames, "frame_rate_hz", r.rec.Camera.GetFrameRateHz(),
		"camera", l.Camera.Addr().String())
	var err error
	select {
	case <-ctx.Done():
	case err = <-errc:
	}
	for _, g := range servers {
		g.Stop()
	}
	return err
}
