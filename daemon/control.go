package daemon

import (
	"bytes"
	"context"
	"io"
	"path"
	"time"

	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	"stillsky/controller"
	"stillsky/daemon/supervisor"
	stillskyv1 "stillsky/proto/stillsky/v1"
)

// maxReconstructorBytes bounds an uploaded reconstructor file (an 8000 × 16000
// float32 matrix with its metadata fits comfortably).
const maxReconstructorBytes = 1 << 30

// saveChunk is the size of the chunks SaveReconstructor streams.
const saveChunk = 1 << 20

// controlServer implements the Control API on a Daemon.
type controlServer struct {
	stillskyv1.UnimplementedControlServiceServer
	d *Daemon
}

func (s *controlServer) GetStatus(context.Context, *stillskyv1.GetStatusRequest) (*stillskyv1.GetStatusResponse, error) {
	return s.d.status(), nil
}

func (s *controlServer) CapturePixelCalibration(ctx context.Context, req *stillskyv1.CapturePixelCalibrationRequest) (*stillskyv1.CapturePixelCalibrationResponse, error) {
	return s.d.capturePixels(ctx, req)
}

func (s *controlServer) OpenLoop(ctx context.Context, _ *stillskyv1.OpenLoopRequest) (*stillskyv1.OpenLoopResponse, error) {
	if err := s.d.requestState(ctx, stateOpen); err != nil {
		return nil, err
	}
	s.d.operator(supervisor.CmdOpen)
	return &stillskyv1.OpenLoopResponse{Status: s.d.status()}, nil
}

func (s *controlServer) CloseLoop(ctx context.Context, _ *stillskyv1.CloseLoopRequest) (*stillskyv1.CloseLoopResponse, error) {
	if err := s.d.requestState(ctx, stateClosed); err != nil {
		return nil, err
	}
	s.d.operator(supervisor.CmdClose)
	return &stillskyv1.CloseLoopResponse{Status: s.d.status()}, nil
}

func (s *controlServer) HoldLoop(ctx context.Context, _ *stillskyv1.HoldLoopRequest) (*stillskyv1.HoldLoopResponse, error) {
	if err := s.d.requestState(ctx, stateHold); err != nil {
		return nil, err
	}
	s.d.operator(supervisor.CmdHold)
	return &stillskyv1.HoldLoopResponse{Status: s.d.status()}, nil
}

func (s *controlServer) ResumeAutonomous(context.Context, *stillskyv1.ResumeAutonomousRequest) (*stillskyv1.ResumeAutonomousResponse, error) {
	if err := s.d.resume(); err != nil {
		return nil, err
	}
	return &stillskyv1.ResumeAutonomousResponse{Status: s.d.status()}, nil
}

func (s *controlServer) SetGain(_ context.Context, req *stillskyv1.SetGainRequest) (*stillskyv1.SetGainResponse, error) {
	if err := s.d.setGainLeak(&req.Gain, nil); err != nil {
		return nil, err
	}
	return &stillskyv1.SetGainResponse{Status: s.d.status()}, nil
}

func (s *controlServer) SetLeak(_ context.Context, req *stillskyv1.SetLeakRequest) (*stillskyv1.SetLeakResponse, error) {
	if err := s.d.setGainLeak(nil, &req.Leak); err != nil {
		return nil, err
	}
	return &stillskyv1.SetLeakResponse{Status: s.d.status()}, nil
}

// OptimiseModalGains implements the Control API.
func (s *controlServer) OptimiseModalGains(ctx context.Context, req *stillskyv1.OptimiseModalGainsRequest) (*stillskyv1.OptimiseModalGainsResponse, error) {
	return s.d.optimiseModalGains(ctx, req)
}

func (s *controlServer) SetModalGains(_ context.Context, req *stillskyv1.SetModalGainsRequest) (*stillskyv1.SetModalGainsResponse, error) {
	if err := s.d.setModalGains(req.GetGains()); err != nil {
		return nil, err
	}
	return &stillskyv1.SetModalGainsResponse{Status: s.d.status()}, nil
}

func (s *controlServer) Calibrate(req *stillskyv1.CalibrateRequest, stream grpc.ServerStreamingServer[stillskyv1.CalibrateResponse]) error {
	return s.d.calibrate(stream.Context(), req, stream.Send)
}

func (s *controlServer) SaveReconstructor(_ *stillskyv1.SaveReconstructorRequest, stream grpc.ServerStreamingServer[stillskyv1.SaveReconstructorResponse]) error {
	r := s.d.u.reconstructor()
	if r == nil {
		return status.Error(codes.FailedPrecondition, errNoReconstructor.Error())
	}
	var buf bytes.Buffer
	if err := controller.WriteReconstructor(&buf, r); err != nil {
		return status.Errorf(codes.Internal, "encoding reconstructor: %v", err)
	}
	for b := buf.Bytes(); len(b) > 0; {
		n := min(len(b), saveChunk)
		if err := stream.Send(&stillskyv1.SaveReconstructorResponse{Chunk: b[:n]}); err != nil {
			return err
		}
		b = b[n:]
	}
	return nil
}

func (s *controlServer) LoadReconstructor(stream grpc.ClientStreamingServer[stillskyv1.LoadReconstructorRequest, stillskyv1.LoadReconstructorResponse]) error {
	var buf bytes.Buffer
	for {
		req, err := stream.Recv()
		if err == io.EOF {
			break
		}
		if err != nil {
			return err
		}
		if buf.Len()+len(req.GetChunk()) > maxReconstructorBytes {
			return status.Errorf(codes.ResourceExhausted, "reconstructor file over %d bytes", maxReconstructorBytes)
		}
		buf.Write(req.GetChunk())
	}
	r, err := controller.ReadReconstructor(&buf)
	if err != nil {
		return status.Errorf(codes.InvalidArgument, "reconstructor file: %v", err)
	}
	if err := s.d.installReconstructor(r, true); err != nil {
		return err
	}
	return stream.SendAndClose(&stillskyv1.LoadReconstructorResponse{Reconstructor: reconstructorInfo(r)})
}

func (s *controlServer) StreamTelemetry(req *stillskyv1.StreamTelemetryRequest, stream grpc.ServerStreamingServer[stillskyv1.StreamTelemetryResponse]) error {
	n := req.GetDecimation()
	if n == 0 {
		return status.Error(codes.InvalidArgument, "telemetry decimation 0: must be >= 1")
	}
	return s.d.u.telemetry.stream(stream.Context(), uint64(n), stream.Send)
}

// countRefused counts Control API calls that end in an error, by method and code:
// every refused request is visible in the metrics.
func (d *Daemon) countRefused(method string, err error) {
	if err == nil {
		return
	}
	code := status.Code(err)
	if code == codes.Canceled {
		return // the client went away; nothing was refused
	}
	d.m.refused.WithLabelValues(path.Base(method), code.String()).Inc()
}

func (d *Daemon) unaryCounter(ctx context.Context, req any, info *grpc.UnaryServerInfo, h grpc.UnaryHandler) (any, error) {
	resp, err := h(ctx, req)
	d.countRefused(info.FullMethod, err)
	return resp, err
}

func (d *Daemon) streamCounter(srv any, ss grpc.ServerStream, info *grpc.StreamServerInfo, h grpc.StreamHandler) error {
	err := h(srv, ss)
	d.countRefused(info.FullMethod, err)
	return err
}

// requestState asks the real-time goroutine for a state change, after checking
// that it is allowed.
func (d *Daemon) requestState(ctx context.Context, s loopState) error {
	cur := d.u.wanted()
	switch s {
	case stateClosed:
		if cur == stateCalibrating {
			return status.Error(codes.FailedPrecondition, "cannot close the loop while calibrating")
		}
		if d.u.params() == nil {
			return status.Error(codes.FailedPrecondition, errNoReconstructor.Error())
		}
		if !d.cameraUp.Load() || !d.mirrorUp.Load() {
			return status.Error(codes.FailedPrecondition, "cannot close the loop: devices not connected")
		}
	case stateHold:
		if cur != stateClosed {
			return status.Errorf(codes.FailedPrecondition, "cannot hold: the loop is %s, not closed", stateNames[cur])
		}
	}
	d.u.request(s)
	d.log.Info("loop state requested", "state", stateNames[s])
	// The real-time goroutine applies the change at its next frame; wait for it
	// so that the status returned shows it, unless frames have stopped.
	d.u.awaitState(ctx, s, 500*time.Millisecond)
	return nil
}
