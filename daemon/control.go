package daemon

import (
	"bytes"
	"context"
	"fmt"
	"io"
	"math"
	"path"
	"time"

	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	"stillsky/controller"
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

func (s *controlServer) OpenLoop(context.Context, *stillskyv1.OpenLoopRequest) (*stillskyv1.OpenLoopResponse, error) {
	if err := s.d.requestState(stateOpen); err != nil {
		return nil, err
	}
	return &stillskyv1.OpenLoopResponse{Status: s.d.status()}, nil
}

func (s *controlServer) CloseLoop(context.Context, *stillskyv1.CloseLoopRequest) (*stillskyv1.CloseLoopResponse, error) {
	if err := s.d.requestState(stateClosed); err != nil {
		return nil, err
	}
	return &stillskyv1.CloseLoopResponse{Status: s.d.status()}, nil
}

func (s *controlServer) HoldLoop(context.Context, *stillskyv1.HoldLoopRequest) (*stillskyv1.HoldLoopResponse, error) {
	if err := s.d.requestState(stateHold); err != nil {
		return nil, err
	}
	return &stillskyv1.HoldLoopResponse{Status: s.d.status()}, nil
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
	r := s.d.reconstructor()
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
	return s.d.telemetry.stream(stream.Context(), uint64(n), stream.Send)
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
func (d *Daemon) requestState(s loopState) error {
	cur := loopState(d.want.Load())
	switch s {
	case stateClosed:
		if cur == stateCalibrating {
			return status.Error(codes.FailedPrecondition, "cannot close the loop while calibrating")
		}
		if d.loopPtr.Load() == nil {
			return status.Error(codes.FailedPrecondition, errNoReconstructor.Error())
		}
		if !d.cameraUp.Load() || !d.mirrorUp.Load() {
			return status.Error(codes.FailedPrecondition, "cannot close the loop: devices not connected")
		}
	case stateHold:
		if cur != stateClosed {
			return status.Errorf(codes.FailedPrecondition, "cannot hold: the loop is %s, not closed", stateNames[cur])
		}
	case stateOpen:
		if cur == stateCalibrating {
			if cal := d.cal.Load(); cal != nil {
				cal.aborted.Store(true)
			}
		}
	}
	d.want.Store(int32(s))
	d.log.Info("loop state requested", "state", stateNames[s])
	// The real-time goroutine applies the change at its next frame; wait for it
	// so that the status returned shows it, unless frames have stopped.
	deadline := time.Now().Add(500 * time.Millisecond)
	for loopState(d.state.Load()) != s && time.Now().Before(deadline) {
		time.Sleep(200 * time.Microsecond)
	}
	return nil
}

// setGainLeak changes the gain and/or the leak, validating first.
func (d *Daemon) setGainLeak(gain, leak *float64) error {
	d.paramsMu.Lock()
	defer d.paramsMu.Unlock()
	g, l := d.gain, d.leak
	if gain != nil {
		g = *gain
	}
	if leak != nil {
		l = *leak
	}
	if err := validGainLeak(g, l); err != nil {
		return status.Error(codes.InvalidArgument, err.Error())
	}
	if loop := d.loopPtr.Load(); loop != nil {
		old := loop.Params()
		p, err := old.WithGain(g)
		if err == nil {
			var q *controller.Params
			q, err = p.WithLeak(l)
			p.Close()
			p = q
		}
		if err != nil {
			return status.Error(codes.InvalidArgument, err.Error())
		}
		if err := loop.SetParams(p); err != nil {
			p.Close()
			return status.Error(codes.Internal, err.Error())
		}
		d.retire(old)
	}
	d.gain, d.leak = g, l
	d.m.gain.Set(g)
	d.m.leak.Set(l)
	d.log.Info("integrator set", "gain", g, "leak", l)
	d.persistSettings()
	return nil
}

func (d *Daemon) setModalGains(gains []float64) error {
	d.paramsMu.Lock()
	defer d.paramsMu.Unlock()
	loop := d.loopPtr.Load()
	if loop == nil {
		return status.Error(codes.FailedPrecondition, errNoReconstructor.Error())
	}
	old := loop.Params()
	if n := old.Reconstructor().NumModes(); len(gains) != n {
		return status.Errorf(codes.InvalidArgument, "modal gains: %d values, want %d (one per controlled mode)", len(gains), n)
	}
	p, err := old.WithModalGains(gains)
	if err != nil {
		return status.Error(codes.InvalidArgument, err.Error())
	}
	return d.swap(p, old)
}

// swap installs p on the loop and the matching gain-0 set on the estimator.
// paramsMu must be held.
func (d *Daemon) swap(p *controller.Params, old *controller.Params) error {
	est, err := p.WithGain(0)
	if err != nil {
		p.Close()
		return status.Error(codes.Internal, err.Error())
	}
	loop, eloop := d.loopPtr.Load(), d.estimator.Load()
	if loop == nil {
		if loop, err = controller.NewLoop(p); err != nil {
			return status.Error(codes.Internal, err.Error())
		}
		if eloop, err = controller.NewLoop(est); err != nil {
			return status.Error(codes.Internal, err.Error())
		}
		d.loopPtr.Store(loop)
		d.estimator.Store(eloop)
		return nil
	}
	oldEst := eloop.Params()
	if err := loop.SetParams(p); err != nil {
		p.Close()
		est.Close()
		return status.Errorf(codes.InvalidArgument, "%v", err)
	}
	if err := eloop.SetParams(est); err != nil {
		est.Close()
		return status.Error(codes.Internal, err.Error())
	}
	d.retire(old, oldEst)
	return nil
}

// retire closes parameter sets once the real-time goroutine can no longer be
// stepping with them: a frame in progress keeps the set it started with.
func (d *Daemon) retire(ps ...*controller.Params) {
	start := d.stats.frames.Load()
	go func() {
		deadline := time.Now().Add(time.Second)
		for d.stats.frames.Load() < start+2 && time.Now().Before(deadline) {
			time.Sleep(time.Millisecond)
		}
		for _, p := range ps {
			if p != nil {
				p.Close()
			}
		}
	}()
}

// installReconstructor builds a parameter set on r and swaps it in.
func (d *Daemon) installReconstructor(r *controller.Reconstructor, persist bool) error {
	g := d.geometry()
	if g == nil {
		return status.Error(codes.FailedPrecondition, "devices not described yet: geometry unknown")
	}
	if r.Slopes != g.slopes || r.Actuators != g.actuators {
		return status.Errorf(codes.InvalidArgument, "reconstructor is %d slopes × %d actuators; the devices have %d × %d",
			r.Slopes, r.Actuators, g.slopes, g.actuators)
	}
	if loopState(d.want.Load()) == stateCalibrating {
		return status.Error(codes.FailedPrecondition, "cannot install a reconstructor while calibrating")
	}
	d.paramsMu.Lock()
	defer d.paramsMu.Unlock()
	p, err := controller.NewParams(controller.ParamsConfig{
		Reconstructor:    r,
		Gain:             d.gain,
		Leak:             d.leak,
		Stroke:           g.stroke,
		StrehlWavelength: d.cfg.ScienceWavelength,
		Kernel:           d.cfg.Kernel,
	})
	if err != nil {
		return status.Error(codes.InvalidArgument, err.Error())
	}
	var old *controller.Params
	if loop := d.loopPtr.Load(); loop != nil {
		old = loop.Params()
	}
	if err := d.swap(p, old); err != nil {
		return err
	}
	d.log.Info("reconstructor installed", "method", r.Method.String(), "modes_kept", r.ModesKept, "slopes", r.Slopes, "actuators", r.Actuators)
	if persist {
		d.persistReconstructor(r)
	}
	return nil
}

func (d *Daemon) reconstructor() *controller.Reconstructor {
	if loop := d.loopPtr.Load(); loop != nil {
		return loop.Params().Reconstructor()
	}
	return nil
}

// calibrate runs one calibration, streaming progress through send.
func (d *Daemon) calibrate(ctx context.Context, req *stillskyv1.CalibrateRequest, send func(*stillskyv1.CalibrateResponse) error) error {
	g := d.geometry()
	if g == nil || !d.cameraUp.Load() || !d.mirrorUp.Load() {
		return status.Error(codes.FailedPrecondition, "cannot calibrate: devices not connected")
	}
	if s := loopState(d.want.Load()); s != stateOpen && s != stateTripped {
		return status.Errorf(codes.FailedPrecondition, "cannot calibrate: the loop is %s; open it first", stateNames[s])
	}
	cc, rc, err := calibrationSettings(req, g)
	if err != nil {
		return status.Error(codes.InvalidArgument, err.Error())
	}
	c, err := controller.NewCalibrator(cc)
	if err != nil {
		return status.Error(codes.InvalidArgument, err.Error())
	}
	cal := &calibration{c: c, done: make(chan struct{}), block: cc.SettleFrames + cc.FramesPerPattern}
	if !d.cal.CompareAndSwap(nil, cal) {
		return status.Error(codes.FailedPrecondition, "a calibration is already running")
	}
	restore := d.selectSource(ctx, stillskyv1.Source_SOURCE_CALIBRATION)
	backToSky := func() {
		if restore {
			restore = false
			d.selectSource(context.WithoutCancel(ctx), stillskyv1.Source_SOURCE_SKY)
		}
	}
	// The sky returns as soon as the pokes end, before the inversion: the open
	// loop that follows must see it (the divergence interlock learns its level).
	defer backToSky()
	_, total := c.Progress()
	d.log.Info("calibration started", "patterns_frames", total, "amplitude_m", cc.Amplitude, "hadamard", cc.Hadamard)
	d.want.Store(int32(stateCalibrating))

	fail := func(code codes.Code, format string, a ...any) error {
		d.m.calibrationsFailed.Inc()
		err := status.Errorf(code, format, a...)
		d.log.Warn("calibration failed", "err", err)
		return err
	}
	tick := time.NewTicker(100 * time.Millisecond)
	defer tick.Stop()
	for done := false; !done; {
		select {
		case <-ctx.Done():
			cal.aborted.Store(true)
			<-cal.done
			return fail(codes.Aborted, "calibration cancelled by the client")
		case <-cal.done:
			done = true
		case <-tick.C:
			if !d.cameraUp.Load() || !d.mirrorUp.Load() {
				cal.aborted.Store(true)
				return fail(codes.Aborted, "calibration aborted: a device was lost")
			}
			_ = send(&stillskyv1.CalibrateResponse{Phase: "pokes", Done: uint32(cal.progress.Load()), Total: uint32(total)})
		}
	}
	backToSky()
	if cal.aborted.Load() || !c.Done() {
		return fail(codes.Aborted, "calibration aborted after %d of %d frames", cal.progress.Load(), total)
	}
	_ = send(&stillskyv1.CalibrateResponse{Phase: "inverting", Done: uint32(total), Total: uint32(total)})
	im, err := c.InteractionMatrix()
	if err != nil {
		return fail(codes.Internal, "interaction matrix: %v", err)
	}
	rc.Created = time.Now().UTC()
	r, err := controller.BuildReconstructor(im, rc)
	if err != nil {
		return fail(codes.Internal, "reconstructor: %v", err)
	}
	if err := d.installReconstructor(r, true); err != nil {
		d.m.calibrationsFailed.Inc()
		return err
	}
	d.m.calibrationsOK.Inc()
	d.log.Info("calibration done", "modes_kept", r.ModesKept, "unseen", r.Unseen)
	return send(&stillskyv1.CalibrateResponse{Phase: "done", Done: uint32(total), Total: uint32(total), Reconstructor: reconstructorInfo(r)})
}

// selectSource asks the camera for a source and reports whether it switched; a
// camera without a calibration source leaves the calibration on the sky, where
// photon noise and turbulence make the interaction matrix noisier.
func (d *Daemon) selectSource(ctx context.Context, src stillskyv1.Source) bool {
	cam := d.camera.Load()
	if cam == nil {
		return false
	}
	_, err := (*cam).SetSource(ctx, &stillskyv1.SetSourceRequest{Source: src})
	switch {
	case status.Code(err) == codes.Unimplemented:
		d.log.Info("camera has no calibration source; calibrating on the sky")
		return false
	case err != nil:
		d.log.Warn("camera refused the source", "source", src.String(), "err", err)
		return false
	}
	return true
}

// calibrationSettings turns a request into calibrator and reconstructor settings,
// filling the defaults: pokes of a tenth of the stroke, two frames per pattern,
// one frame more settling than the loop delay.
func calibrationSettings(req *stillskyv1.CalibrateRequest, g *geometry) (controller.CalibrationConfig, controller.ReconstructorConfig, error) {
	cc := controller.CalibrationConfig{
		Actuators:        g.actuators,
		Slopes:           g.slopes,
		Amplitude:        req.GetAmplitudeM(),
		FramesPerPattern: int(req.GetFramesPerPattern()),
		SettleFrames:     max(g.delayFrames, 1) + 1,
		Hadamard:         req.GetHadamard(),
	}
	if g.lockstep {
		cc.SettleFrames = g.delayFrames
	}
	if cc.Amplitude == 0 {
		cc.Amplitude = 0.1 * g.stroke
	}
	if cc.Amplitude > g.stroke {
		return cc, controller.ReconstructorConfig{}, fmt.Errorf("poke amplitude %g m exceeds the mirror's stroke %g m", cc.Amplitude, g.stroke)
	}
	if cc.FramesPerPattern == 0 {
		cc.FramesPerPattern = 2
	}
	rc := controller.ReconstructorConfig{
		Method:       controller.MethodTruncatedSVD,
		ModesKept:    int(req.GetModesKept()),
		MaxCondition: req.GetMaxCondition(),
	}
	if t := req.GetTikhonov(); t != 0 {
		if !(t > 0) || math.IsInf(t, 0) {
			return cc, rc, fmt.Errorf("tikhonov weight %g: must be finite and > 0", t)
		}
		rc.Method, rc.Regularization = controller.MethodTikhonov, t
	}
	if c := rc.MaxCondition; c != 0 && !(c >= 1 && !math.IsInf(c, 0)) {
		return cc, rc, fmt.Errorf("max condition %g: must be finite and >= 1 (or 0 for the default)", c)
	}
	if a := req.GetAmplitudeM(); a != 0 && (!(a > 0) || math.IsInf(a, 0)) {
		return cc, rc, fmt.Errorf("poke amplitude %g m: must be finite and > 0 (or 0 for the default)", a)
	}
	return cc, rc, nil
}

func reconstructorInfo(r *controller.Reconstructor) *stillskyv1.ReconstructorInfo {
	if r == nil {
		return nil
	}
	info := &stillskyv1.ReconstructorInfo{
		Method:         r.Method.String(),
		ModesKept:      uint32(r.ModesKept),
		SlopeCount:     uint32(r.Slopes),
		ActuatorCount:  uint32(r.Actuators),
		CreatedUnix:    r.Created.Unix(),
		SingularValues: r.SingularValues,
	}
	if k := r.ModesKept; k > 0 && k <= len(r.SingularValues) && r.SingularValues[k-1] > 0 {
		info.ConditionNumber = r.SingularValues[0] / r.SingularValues[k-1]
	}
	return info
}

// status is the GetStatus snapshot.
func (d *Daemon) status() *stillskyv1.GetStatusResponse {
	st := &d.stats
	d.paramsMu.Lock()
	gain, leak := d.gain, d.leak
	d.paramsMu.Unlock()
	s := &stillskyv1.GetStatusResponse{
		State:                 loopState(d.state.Load()).proto(),
		Gain:                  gain,
		Leak:                  leak,
		Frames:                st.frames.Load(),
		FramesDropped:         st.dropped.Load(),
		FramesRejected:        st.rejected.Load(),
		LastFrame:             st.lastFrame.Load(),
		Reconstructor:         reconstructorInfo(d.reconstructor()),
		ResidualSlopeRmsRad:   st.slopeRMS.Load(),
		ResidualWavefrontRmsM: st.wavefrontRMS.Load(),
		StrehlEstimate:        st.strehl.Load(),
		ScienceWavelengthM:    d.cfg.ScienceWavelength,
		SaturatedActuators:    uint32(st.saturated.Load()),
		RtcLatency:            st.rtc.summary(),
		EndToEndLatency:       st.e2e.summary(),
		InterlockTrips:        st.trips.Load(),
		LastInterlock:         st.lastTrip(),
		CameraConnected:       d.cameraUp.Load(),
		MirrorConnected:       d.mirrorUp.Load(),
	}
	if g := d.geometry(); g != nil {
		s.SlopeCount, s.ActuatorCount, s.FrameRateHz = uint32(g.slopes), uint32(g.actuators), g.frameRate
	}
	return s
}
