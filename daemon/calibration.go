package daemon

import (
	"context"
	"fmt"
	"math"
	"sync/atomic"
	"time"

	"gonum.org/v1/gonum/mat"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	"stillsky/controller"
	stillskyv1 "stillsky/proto/stillsky/v1"
)

// calibration is one calibration run shared between the Control API (which starts
// it and builds the reconstructor) and the real-time goroutine (which drives it).
type calibration struct {
	c        *controller.Calibrator
	done     chan struct{} // closed by the real-time goroutine when c is Done or aborted
	aborted  atomic.Bool
	progress atomic.Int64 // frames consumed
	started  bool         // real-time goroutine only: the first pattern has been sent
	// Real-time goroutine only. block is the frames of one push or pull block;
	// blockAt the calibrator's frame count at which the current block began,
	// blockFrame the number of the frame whose command began it, and waited
	// how many frames have been held back since.
	block      int
	blockAt    int
	blockFrame uint64
	waited     int
}

// maxCalibrationWait bounds how many frames a free-running calibration holds
// back waiting for a block's command to show: a mirror that never
// acknowledges slows calibration down but does not stop it.
const maxCalibrationWait = 50

// calibrate runs one calibration, streaming progress through send.
func (d *Daemon) calibrate(ctx context.Context, req *stillskyv1.CalibrateRequest, send func(*stillskyv1.CalibrateResponse) error) error {
	g := d.geometry()
	if g == nil || !d.cameraUp.Load() || !d.mirrorUp.Load() {
		return status.Error(codes.FailedPrecondition, "cannot calibrate: devices not connected")
	}
	if s := d.u.wanted(); s != stateOpen && s != stateTripped {
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
	if !d.u.startCalibration(cal) {
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
	d.u.request(stateCalibrating)

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
	if rc.BasisName == "kl" && req.GetModesKept() == 0 {
		cond := req.GetMaxCondition()
		if cond == 0 {
			cond = controller.DefaultMaxCondition
		}
		n, err := seenModes(im, cond)
		if err != nil {
			return fail(codes.Internal, "reconstructor: %v", err)
		}
		rc.Basis = mat.DenseCopyOf(rc.Basis.Slice(0, g.actuators, 0, min(n, g.actuators-1)))
	}
	rc.Created = time.Now().UTC()
	rc.Progress = inversionProgress(send)
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
// filling the defaults: pokes of a tenth of the stroke, Hadamard patterns from
// HadamardActuators actuators up unless the request asks for single pokes, two
// frames per pattern (one for Hadamard patterns), one frame more settling than
// the loop delay.
func calibrationSettings(req *stillskyv1.CalibrateRequest, g *geometry) (controller.CalibrationConfig, controller.ReconstructorConfig, error) {
	cc := controller.CalibrationConfig{
		Actuators:        g.actuators,
		Slopes:           g.slopes,
		Amplitude:        req.GetAmplitudeM(),
		FramesPerPattern: int(req.GetFramesPerPattern()),
		SettleFrames:     max(g.delayFrames, 1) + 1,
		Hadamard:         req.GetHadamard() || (g.actuators >= HadamardActuators && !req.GetSinglePokes()),
	}
	if req.GetHadamard() && req.GetSinglePokes() {
		return cc, controller.ReconstructorConfig{}, fmt.Errorf("hadamard and single_pokes: ask for one pattern kind, not both")
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
		cc.FramesPerPattern = defaultFramesPerPattern(cc.Hadamard)
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
	switch b := req.GetBasis(); b {
	case "", "svd":
	case "kl":
		if rc.Method != controller.MethodTruncatedSVD {
			return cc, rc, fmt.Errorf("basis kl: only with truncated SVD, not tikhonov")
		}
		basis, err := klBasis(g, rc.ModesKept)
		if err != nil {
			return cc, rc, fmt.Errorf("basis kl: %w", err)
		}
		rc.Basis, rc.BasisName, rc.ModesKept = basis, "kl", 0
		if rc.MaxCondition == 0 {
			rc.MaxCondition = klMaxCondition
		}
	case controller.MirrorBasisName:
		if rc.Method != controller.MethodTruncatedSVD {
			return cc, rc, fmt.Errorf("basis mirror: only with truncated SVD, not tikhonov")
		}
		if rc.MaxCondition > controller.MaxNormalCondition {
			return cc, rc, fmt.Errorf("basis mirror: max condition %g: at most %g", rc.MaxCondition, float64(controller.MaxNormalCondition))
		}
		if err := g.hasLayout(); err != nil {
			return cc, rc, fmt.Errorf("basis mirror: %w", err)
		}
		metric, err := controller.MirrorMetric(g.actuatorPositions(), g.pitch, g.coupling)
		if err != nil {
			return cc, rc, fmt.Errorf("basis mirror: %w", err)
		}
		rc.Metric, rc.BasisName = metric, controller.MirrorBasisName
	default:
		return cc, rc, fmt.Errorf("basis %q: want \"svd\" (or empty), \"kl\" or \"mirror\"", b)
	}
	if c := rc.MaxCondition; c != 0 && !(c >= 1 && !math.IsInf(c, 0)) {
		return cc, rc, fmt.Errorf("max condition %g: must be finite and >= 1 (or 0 for the default)", c)
	}
	if a := req.GetAmplitudeM(); a != 0 && (!(a > 0) || math.IsInf(a, 0)) {
		return cc, rc, fmt.Errorf("poke amplitude %g m: must be finite and > 0 (or 0 for the default)", a)
	}
	return cc, rc, nil
}

// calibrate drives the calibration for frame f, on the real-time goroutine:
// the frame's slopes go to the calibrator once they can show the block's
// pattern, and the next pattern goes into rt.cmd; flat once it is done or
// aborted, and the loop open.
func (rt *realtime) calibrate(f *stillskyv1.StreamFramesResponse) controller.Result {
	var res controller.Result
	cal := rt.u.cal.Load()
	if cal == nil || cal.aborted.Load() {
		rt.finishCalibration(cal)
		copy(rt.cmd, rt.flat)
		return res
	}
	if cal.started && rt.showsBlock(cal, f) {
		// The frame was validated by the assembler, so Feed cannot refuse it.
		_ = cal.c.Feed(rt.slopes)
		cal.progress.Store(int64(progressOf(cal.c)))
	}
	if done, _ := cal.c.Progress(); !cal.started || done%cal.block == 0 && done != cal.blockAt {
		cal.blockAt, cal.blockFrame, cal.waited = done, f.GetFrameNumber(), 0
	}
	cal.started = true
	if cal.c.Done() {
		rt.finishCalibration(cal)
		copy(rt.cmd, rt.flat)
		return res
	}
	cal.c.Command(rt.cmd)
	res.SlopeRMS = rms32(rt.slopes)
	return res
}

// finishCalibration hands a finished or aborted calibration back to the
// control plane and opens the loop.
func (rt *realtime) finishCalibration(cal *calibration) {
	u := rt.u
	if cal != nil {
		close(cal.done)
		u.cal.Store(nil)
	}
	u.want.CompareAndSwap(int32(stateCalibrating), int32(stateOpen))
	rt.state = stateOpen
	rt.guard.opening()
	u.setState(stateOpen)
}

func progressOf(c *controller.Calibrator) int {
	done, _ := c.Progress()
	return done
}

// showsBlock reports whether frame f can show the command that began the
// current calibration block. Lockstep cameras guarantee it by their delay. A
// free-running camera shows at frame j the command that had reached the mirror
// by the readout before it, so a command that arrives late (a busy machine, a
// slow link) shows a frame or more later than the loop delay says: frame f
// counts only once the mirror has acknowledged the block's command at least a
// frame period before f's readout. The calibrator's settle frames then follow.
func (rt *realtime) showsBlock(cal *calibration, f *stillskyv1.StreamFramesResponse) bool {
	if rt.g.lockstep {
		return true
	}
	slot := cal.blockFrame % readoutRing
	if rt.tags[slot].Load() == cal.blockFrame {
		if at := rt.acked[slot].Load(); at != 0 && at <= f.GetReadoutEndNs()-rt.period {
			return true
		}
	}
	cal.waited++
	return cal.waited > maxCalibrationWait
}

// klBasis returns the first kept Karhunen–Loève modes of the mirror described
// in g (controller.KLBasis; all but the piston-like last when kept is 0), on
// a pupil of (actuators across − 1) pitches, the outer actuator rows on its
// edge.
func klBasis(g *geometry, kept int) (*mat.Dense, error) {
	if err := g.hasLayout(); err != nil {
		return nil, err
	}
	b, _, err := controller.KLBasis(controller.KLConfig{
		Positions: g.actuatorPositions(), Pitch: g.pitch, Coupling: g.coupling,
		Diameter: float64(g.across-1) * g.pitch,
	})
	if err != nil {
		return nil, err
	}
	if kept == 0 {
		kept = g.actuators - 1
	}
	if kept > g.actuators-1 {
		return nil, fmt.Errorf("modes kept %d: at most %d (actuators less piston)", kept, g.actuators-1)
	}
	return mat.DenseCopyOf(b.Slice(0, g.actuators, 0, kept)), nil
}

// hasLayout reports whether the mirror described its actuators' positions,
// which the modal bases need.
func (g *geometry) hasLayout() error {
	if len(g.positions) != 2*g.actuators || g.across < 2 || !(g.pitch > 0) {
		return fmt.Errorf("the mirror describes no actuator layout (%d position values for %d actuators, %d across, pitch %g m)",
			len(g.positions), g.actuators, g.across, g.pitch)
	}
	return nil
}

// actuatorPositions returns the mirror's actuator positions as (x, y) pairs.
func (g *geometry) actuatorPositions() [][2]float64 {
	pos := make([][2]float64, g.actuators)
	for i := range pos {
		pos[i] = [2]float64{g.positions[2*i], g.positions[2*i+1]}
	}
	return pos
}

// klMaxCondition is the truncation of M·B, the interaction matrix in KL modes,
// when the request sets no max_condition: the basis is already cut to the modes
// the sensor sees, and tilt, seen weakest per unit rms, must not be cut.
const klMaxCondition = 100

// seenModes counts the singular values of m within cond of the largest: the
// number of KL modes kept by default, as many as the zonal reconstructor
// controls (TestKLControlClosedLoop in package controller compares the two).
func seenModes(m *mat.Dense, cond float64) (int, error) {
	var svd mat.SVD
	if !svd.Factorize(m, mat.SVDNone) {
		return 0, fmt.Errorf("singular values of the interaction matrix did not converge")
	}
	sv := svd.Values(nil)
	n := 0
	for n < len(sv) && sv[n] > 0 && sv[0]/sv[n] <= cond {
		n++
	}
	return max(n, 1), nil
}
