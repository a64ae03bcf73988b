package daemon

import (
	"context"
	"errors"
	"fmt"
	"runtime"
	"slices"
	"sync"
	"sync/atomic"
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	"stillsky/analysis"
	"stillsky/controller"
	"stillsky/internal/affinity"
	stillskyv1 "stillsky/proto/stillsky/v1"
)

// The loop's analysis of itself runs beside it, never on the real-time
// goroutine: every analysisPeriod the analysis goroutine reads a block of
// consecutive frames (slopes, the command answering each and the lag of the
// command the mirror held) from the telemetry ring, the same one the telemetry
// stream and recordings read, and turns it into pseudo-open-loop slopes, the
// turbulence estimate (r0, L0, wind, τ0) and the error budget at the current
// gain, which the metrics export. The real-time goroutine does nothing for it
// beyond filling the ring.
const (
	analysisPeriod = 10 * time.Second
	analysisFrames = 2048
	// maxApplyLag is how far back a free-running frame looks for the command
	// the mirror held during its exposure.
	maxApplyLag = 6
	// minGainFrames and maxGainFrames bound OptimiseModalGains.
	minGainFrames, maxGainFrames, defaultGainFrames = 512, 65536, 4096
	// gainSegment is the length of the spectra's segments, frames.
	gainSegment = 256
)

// capture is a block of consecutive frames, copied out of the telemetry ring by
// the analysis goroutine alone.
type capture struct {
	slopes, cmds [][]float32
	lag          []int
	count        int
	next         uint64 // the frame number the block needs next
	seq          uint64 // the ring's sequence number to read next (0: start at the newest)
	x            *telemetrySample
}

func newCapture(frames, slopes, actuators int) *capture {
	c := &capture{slopes: make([][]float32, frames), cmds: make([][]float32, frames), lag: make([]int, frames)}
	for i := range frames {
		c.slopes[i] = make([]float32, slopes)
		c.cmds[i] = make([]float32, actuators)
	}
	return c
}

// reset empties the block; it starts again from the ring's next frame.
func (c *capture) reset() { c.count, c.seq = 0, 0 }

// take copies the frames the ring b holds past the last one taken into the
// block and says whether the block is full. A gap in frame numbers (a frame
// dropped, or lost to the ring by a reader a whole ring behind), or a state in
// which the mirror is neither driven by the loop nor held flat, restarts the
// block.
func (c *capture) take(b *telemetryBuffer) bool {
	if c.x == nil || len(c.x.slopes) != len(b.slots[0].slopes) || len(c.x.cmd) != len(b.slots[0].cmd) {
		c.x = b.sample()
	}
	if len(c.slopes[0]) != len(c.x.slopes) || len(c.cmds[0]) != len(c.x.cmd) {
		return false
	}
	if c.seq == 0 {
		c.seq, c.count = b.written.Load()+1, 0
	}
	for c.count < len(c.slopes) {
		switch b.read(c.seq, c.x) {
		case readNotYet:
			return false
		case readOverrun:
			// Fell a ring behind: start again from the newest frame.
			c.seq, c.count = b.written.Load(), 0
			continue
		}
		c.seq++
		x := c.x
		if (x.state != stateClosed && x.state != stateOpen) || (c.count > 0 && x.frame != c.next) {
			c.count = 0
			if x.state != stateClosed && x.state != stateOpen {
				continue
			}
		}
		i := c.count
		copy(c.slopes[i], x.slopes)
		copy(c.cmds[i], x.cmd)
		c.lag[i] = x.lag
		c.count++
		c.next = x.frame + 1
	}
	return true
}

// applyLag returns how many frames before f the command the mirror held during
// f's exposure was computed. A lockstep camera says so (its delay). A
// free-running one shows the command that had reached the mirror by the
// exposure's start, a frame period before its readout: the newest acknowledged
// by then, as the calibration counts it. Outside a calibration the mirror
// acknowledges in batches (protocol version 2) of a quarter second of
// commands, so most recent commands are not acknowledged yet when their
// frames look for them: at the first such command, the newest end-to-end
// latency e known stands in. Frame j's command reaches the mirror at
// readout_j + e, by the start of f's exposure when (f − j)·period ≥ period +
// e: the lag is 1 + ⌈e/period⌉, and at least as old as the unacknowledged
// command. With no latency known yet, the lag of the frame before. It runs on
// the real-time goroutine for every frame and allocates nothing.
func (rt *realtime) applyLag(f *stillskyv1.StreamFramesResponse) int {
	if rt.g.lockstep {
		return max(rt.g.delayFrames, 1)
	}
	num := f.GetFrameNumber()
	start := f.GetReadoutEndNs() - rt.period
	e := rt.lastE2E.Load()
	for k := uint64(1); k <= maxApplyLag && k <= num; k++ {
		j := num - k
		slot := j % readoutRing
		if rt.tags[slot].Load() != j {
			continue
		}
		at := rt.acked[slot].Load()
		if at != 0 && at <= start {
			return int(k)
		}
		if at == 0 && e > 0 && rt.period > 0 {
			return int(min(max(1+(e+rt.period-1)/rt.period, int64(k)), maxApplyLag))
		}
	}
	return rt.lastLag
}

// series returns the pseudo-open-loop projections of a full capture: for each
// frame whose applied command is in the block, proj of (slopes, applied), and
// the median lag.
func (c *capture) series(proj *analysis.Projector) ([][]float64, int) {
	var out [][]float64
	lags := make([]int, 0, len(c.lag))
	for i := maxApplyLag; i < len(c.slopes); i++ {
		j := i - c.lag[i]
		if j < 0 {
			continue
		}
		a := make([]float64, proj.Modes())
		proj.Coefficients(c.slopes[i], c.cmds[j], a)
		out = append(out, a)
		lags = append(lags, c.lag[i])
	}
	slices.Sort(lags)
	return out, lags[len(lags)/2]
}

// analyser holds the analysis goroutine's state: the estimator and projectors
// built for the reconstructor in use, and the last results.
type analyser struct {
	mu       sync.Mutex // serialises captures (periodic and on request)
	recon    *controller.Reconstructor
	est      *analysis.Estimator
	zproj    *analysis.Projector // Zernike coefficients
	mproj    *analysis.Projector // the reconstructor's modes
	unitNois []float64           // modal noise at unit slope noise
	kappa    []float64           // low-order steady-state correction
	buf      *capture            // the last capture, reused when the size matches
	last     atomic.Pointer[Analysis]
}

// Analysis is the daemon's latest analysis of its own loop.
type Analysis struct {
	// Turbulence estimated from pseudo-open-loop slopes.
	Turbulence analysis.TurbulenceEstimate
	// SlopeNoise is the rms slope noise (radians) the estimate found.
	SlopeNoise float64
	// Budget is the error budget at the gain in use, from the estimated
	// turbulence, at the science wavelength.
	Budget analysis.Budget
	// Gain of the loop when the frames were taken.
	Gain float64
}

// Reconstructor returns the reconstructor in use, or nil.
func (d *Daemon) Reconstructor() *controller.Reconstructor { return d.u.reconstructor() }

// LatestAnalysis returns the latest analysis, or nil before the first.
func (d *Daemon) LatestAnalysis() *Analysis { return d.an.last.Load() }

// analyse runs the periodic analysis until ctx ends. It is background work: its
// thread runs under SCHED_IDLE, so it takes only CPU time that the loop (and a
// bench in the same process) leave.
func (d *Daemon) analyse(ctx context.Context) {
	runtime.LockOSThread() // never unlocked: the thread ends with the goroutine
	if err := affinity.IdleThread(); err != nil {
		d.log.Info("analysis runs at normal priority", "err", err)
	}
	period := d.cfg.AnalysisPeriod
	if period == 0 {
		period = analysisPeriod
	}
	t := time.NewTicker(period)
	defer t.Stop()
	for {
		select {
		case <-ctx.Done():
			return
		case <-t.C:
		}
		if err := d.analyseOnce(ctx); err != nil && !errors.Is(err, errNotReady) {
			d.log.Debug("analysis skipped", "err", err)
		}
	}
}

var errNotReady = errors.New("analysis: the loop is not ready")

// prepare returns the geometry, the describes and the reconstructor, building
// the estimator and projectors when the reconstructor changed.
func (d *Daemon) prepare() (*geometry, *describes, *controller.Reconstructor, error) {
	g, desc, r := d.geometry(), d.describes.Load(), d.u.reconstructor()
	if g == nil || desc == nil || r == nil || r.Interaction == nil {
		return nil, nil, nil, errNotReady
	}
	a := &d.an
	if a.recon == r {
		return g, desc, r, nil
	}
	cam := desc.cam
	geom := analysis.SensorGeometry{Subapertures: int(cam.GetSubapertures()), SubapertureSize: cam.GetSubapertureSizeM(),
		PupilDiameter: cam.GetPupilDiameterM(), Wavelength: cam.GetWavelengthM(), Obstruction: cam.GetObstruction()}
	for _, v := range cam.GetValidSubapertures() {
		geom.Valid = append(geom.Valid, int(v))
	}
	est, err := analysis.NewEstimator(geom, analysis.EstimatorConfig{})
	if err != nil {
		return nil, nil, nil, err
	}
	zp, err := analysis.NewProjector(est.Projection(), r.Interaction)
	if err != nil {
		return nil, nil, nil, err
	}
	var mp *analysis.Projector
	if r.Inverse != nil {
		if mp, err = analysis.NewProjector(r.Inverse, r.Interaction); err != nil {
			return nil, nil, nil, err
		}
	}
	mir := desc.mir
	pos := mir.GetPositionsM()
	m := analysis.Mirror{Pitch: mir.GetPitchM(), Coupling: mir.GetCoupling()}
	for i := 0; i+1 < len(pos); i += 2 {
		m.Positions = append(m.Positions, [2]float64{pos[i], pos[i+1]})
	}
	var unit, kappa []float64
	if surf, err := analysis.NewSurface(geom.PupilDiameter, cam.GetObstruction(), m, 4); err == nil {
		ones := make([]float64, r.Slopes)
		for i := range ones {
			ones[i] = 1
		}
		unit, _ = analysis.PropagateNoise(r, ones, surf)
		kappa, _ = analysis.LowOrderCorrection(r, geom, surf)
	}
	a.recon, a.est, a.zproj, a.mproj, a.unitNois, a.kappa = r, est, zp, mp, unit, kappa
	return g, desc, r, nil
}

// record reads n consecutive frames from the telemetry ring, from the next
// one on; the caller holds an.mu.
func (d *Daemon) record(ctx context.Context, g *geometry, n int) (*capture, error) {
	c := d.an.buf
	if c == nil || len(c.slopes) != n || len(c.slopes[0]) != g.slopes || len(c.cmds[0]) != g.actuators {
		c = newCapture(n, g.slopes, g.actuators)
		d.an.buf = c
	}
	c.reset()
	wait := time.Duration(float64(n)/g.frameRate*3*float64(time.Second)) + 2*time.Second
	deadline := time.NewTimer(wait)
	defer deadline.Stop()
	tick := time.NewTicker(analysisPoll)
	defer tick.Stop()
	var b *telemetryBuffer
	for {
		if cur := d.u.telemetry.buf.Load(); cur != b {
			// A new device session: its ring, from its next frame.
			b = cur
			c.reset()
		}
		if b != nil && c.take(b) {
			return c, nil
		}
		select {
		case <-tick.C:
		case <-deadline.C:
			return nil, status.Errorf(codes.DeadlineExceeded, "analysis: %d consecutive frames did not come within %v", n, wait)
		case <-ctx.Done():
			return nil, ctx.Err()
		}
	}
}

// analysisPoll is how often the analysis reads the telemetry ring while it
// takes a block: well inside the ring's second of frames.
const analysisPoll = 5 * time.Millisecond

// loopModel returns the loop's temporal model at the gain in use.
func (d *Daemon) loopModel(g *geometry, lag int) analysis.Loop {
	d.paramsMu.Lock()
	gain, leak := d.gain, d.leak
	d.paramsMu.Unlock()
	return analysis.Loop{Gain: gain, Leak: leak, Delay: max(lag, 1), FrameRate: g.frameRate}
}

// analyseOnce captures a block and updates the estimates and the budget.
func (d *Daemon) analyseOnce(ctx context.Context) error {
	a := &d.an
	a.mu.Lock()
	defer a.mu.Unlock()
	if s := d.u.current(); s != stateClosed && s != stateOpen {
		return errNotReady
	}
	g, desc, _, err := d.prepare()
	if err != nil {
		return err
	}
	c, err := d.record(ctx, g, analysisFrames)
	if err != nil {
		return err
	}
	series, lag := c.series(a.zproj)
	te, err := a.est.Estimate(series, g.frameRate, desc.cam.GetZenithDeg())
	if err != nil {
		return err
	}
	res := &Analysis{Turbulence: te, SlopeNoise: a.est.SlopeNoise(te)}
	loop := d.loopModel(g, lag)
	res.Gain = loop.Gain
	m := d.m
	m.r0.Set(te.R0)
	m.tau0.Set(te.Tau0)
	m.outerScale.Set(te.L0)
	m.wind.Set(te.Wind)
	m.slopeNoise.Set(res.SlopeNoise)
	if loop.Gain > 0 && loop.Validate() == nil {
		in := analysis.BudgetInput{
			Optics: analysis.Optics{Diameter: desc.cam.GetPupilDiameterM(), Subaperture: desc.cam.GetSubapertureSizeM(),
				Pitch: desc.mir.GetPitchM(), ScienceWavelength: d.cfg.ScienceWavelength, Coupling: desc.mir.GetCoupling()},
			Turbulence: analysis.Turbulence{R0: te.R0, L0: te.L0, ZenithDeg: desc.cam.GetZenithDeg(),
				Layers: []analysis.Layer{{Fraction: 1, WindSpeed: te.Wind}}},
			Loop:     loop,
			LowOrder: a.kappa,
		}
		if a.unitNois != nil {
			in.ModalNoise = make([]float64, len(a.unitNois))
			for i, v := range a.unitNois {
				in.ModalNoise[i] = v * res.SlopeNoise * res.SlopeNoise
			}
			if p := d.u.params(); p != nil && len(p.Config().ModalGains) == len(in.ModalNoise) {
				in.ModalGains = p.Config().ModalGains
			}
		}
		b, err := analysis.Compute(in)
		if err != nil {
			return err
		}
		res.Budget = b
		m.setBudget(b)
	}
	a.last.Store(res)
	return nil
}

// optimiseModalGains records frames, finds each mode's gain from its
// pseudo-open-loop spectrum and applies them relative to the current gain.
func (d *Daemon) optimiseModalGains(ctx context.Context, req *stillskyv1.OptimiseModalGainsRequest) (*stillskyv1.OptimiseModalGainsResponse, error) {
	n := int(req.GetFrames())
	if n == 0 {
		n = defaultGainFrames
	}
	if n < minGainFrames || n > maxGainFrames {
		return nil, status.Errorf(codes.InvalidArgument, "frames %d: must be in [%d, %d]", n, minGainFrames, maxGainFrames)
	}
	if s := d.u.current(); s != stateClosed && s != stateOpen {
		return nil, status.Errorf(codes.FailedPrecondition, "the loop is %s: optimising gains needs it open or closed", stateNames[s])
	}
	a := &d.an
	a.mu.Lock()
	defer a.mu.Unlock()
	g, _, r, err := d.prepare()
	if err != nil {
		if errors.Is(err, errNotReady) {
			return nil, status.Error(codes.FailedPrecondition, "no reconstructor with an interaction matrix is loaded: calibrate first")
		}
		return nil, status.Error(codes.Internal, err.Error())
	}
	if a.mproj == nil {
		return nil, status.Errorf(codes.FailedPrecondition, "the %v reconstructor has no modes to set gains on", r.Method)
	}
	c, err := d.record(ctx, g, n)
	if err != nil {
		return nil, err
	}
	series, lag := c.series(a.mproj)
	spectra, err := analysis.ModalSpectra(series, g.frameRate, gainSegment)
	if err != nil {
		return nil, status.Error(codes.Internal, err.Error())
	}
	loop := d.loopModel(g, lag)
	if !(loop.Gain > 0) {
		return nil, status.Error(codes.FailedPrecondition, "the loop gain is 0: set a gain first (modal gains are relative to it)")
	}
	mg, err := analysis.OptimiseGains(spectra, loop, nil)
	if err != nil {
		return nil, status.Error(codes.Internal, err.Error())
	}
	current := d.u.params().Config().ModalGains
	resp := &stillskyv1.OptimiseModalGainsResponse{Gains: make([]float64, len(mg.Gains))}
	for i, s := range spectra {
		l := loop
		if current != nil {
			l.Gain *= current[i]
		}
		resp.PredictedResidualBefore += analysis.ModalResidual(s, l)
		resp.PredictedResidualAfter += mg.Residual[i]
		resp.Gains[i] = mg.Gains[i] / loop.Gain
	}
	if !req.GetDryRun() {
		if err := d.setModalGains(resp.Gains); err != nil {
			return nil, err
		}
		d.log.Info("modal gains optimised", "modes", len(resp.Gains), "frames", n,
			"predicted_before", resp.PredictedResidualBefore, "predicted_after", resp.PredictedResidualAfter)
	}
	resp.Status = d.status()
	return resp, nil
}

// setBudget exports a budget.
func (m *metrics) setBudget(b analysis.Budget) {
	for i, v := range []float64{b.Fitting, b.Aliasing, b.Servo, b.Noise, b.LowOrder, b.Total} {
		m.budget[i].Set(v)
	}
	m.budgetStrehl.Set(b.Strehl)
}

// budgetTerms are the label values of stillsky_budget_residual_square_radians.
var budgetTerms = [...]string{"fitting", "aliasing", "servo", "noise", "low_order", "total"}

// String formats an analysis on one line.
func (a *Analysis) String() string {
	t, b := a.Turbulence, a.Budget
	return fmt.Sprintf("r0 %.3f m, L0 %.0f m, wind %.1f m/s, τ0 %.2f ms; budget %.4f rad² (Strehl %.3f)", t.R0, t.L0, t.Wind, t.Tau0*1e3, b.Total, b.Strehl)
}
