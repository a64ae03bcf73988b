package demo

import (
	"context"
	"errors"
	"fmt"
	"io"
	"math/rand/v2"
	"slices"
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	"stillsky/controller/mvm"
	stillskyv1 "stillsky/proto/stillsky/v1"
	"stillsky/rig"
)

// realTimeWatch is how long the demo watches the free-running loop before
// calibrating, to see whether frames arrive at the bench's rate.
const realTimeWatch = 2 * time.Second

// Real-time thresholds (*common practice* margins): at least 90 % of the
// frames must arrive in time, and the closed loop's matrix–vector product,
// which the open loop does not yet do, must take at most half a frame period,
// leaving the other half to receiving, sending and the bench beside it.
const (
	minFramesInTime = 0.9
	maxMVMShare     = 0.5
)

// realTimeVerdict says whether the free-running bench and loop keep real time
// on this machine, and if not, why, in a sentence for the user.
type realTimeVerdict struct {
	ok  bool
	why string
}

// checkRealTime watches the free-running loop of r for realTimeWatch, then
// times the closed loop's multiply for the loop's geometry.
func checkRealTime(ctx context.Context, r *rig.Rig) (realTimeVerdict, error) {
	first, err := r.Status(ctx)
	if err != nil {
		return realTimeVerdict{}, err
	}
	t0 := time.Now()
	select {
	case <-ctx.Done():
		return realTimeVerdict{}, ctx.Err()
	case <-time.After(realTimeWatch):
	}
	last, err := r.Status(ctx)
	if err != nil {
		return realTimeVerdict{}, err
	}
	el := time.Since(t0).Seconds()
	rate := last.GetFrameRateHz()
	got := float64(last.GetFrames()-first.GetFrames()) / el
	dropped := last.GetFramesDropped() - first.GetFramesDropped()
	period := 1 / rate
	if got < minFramesInTime*rate {
		return realTimeVerdict{why: fmt.Sprintf("the loop received %.0f of the bench's %.0f frames/s in time (%d dropped in %.1f s)",
			got, rate, dropped, el)}, nil
	}
	if rtc := last.GetRtcLatency().GetP50(); rtc > period {
		return realTimeVerdict{why: fmt.Sprintf("the loop's own work per frame (rtc p50 %.0f µs) is longer than the %.0f µs frame period",
			rtc*1e6, period*1e6)}, nil
	}
	mvmTime, err := timeMVM(int(last.GetActuatorCount()), int(last.GetSlopeCount()))
	if err != nil {
		return realTimeVerdict{}, err
	}
	if mvmTime > maxMVMShare*period {
		return realTimeVerdict{why: fmt.Sprintf("the closed loop's %d × %d matrix–vector product takes %.0f µs here (median of 15), more than half the %.0f µs frame period",
			last.GetActuatorCount(), last.GetSlopeCount(), mvmTime*1e6, period*1e6)}, nil
	}
	return realTimeVerdict{ok: true}, nil
}

// timeMVM returns the median time of 15 products y = A·x with a random
// actuators × slopes float32 matrix, through the kernel the loop uses.
func timeMVM(actuators, slopes int) (float64, error) {
	if actuators < 1 || slopes < 1 {
		return 0, fmt.Errorf("demo: the loop reports %d actuators × %d slopes", actuators, slopes)
	}
	a, err := mvm.NewMatrix(actuators, slopes)
	if err != nil {
		return 0, err
	}
	rng := rand.New(rand.NewPCG(1, 2))
	for i := range a.Data {
		a.Data[i] = rng.Float32() - 0.5
	}
	m, err := mvm.New(a, mvm.Options{})
	if err != nil {
		return 0, err
	}
	defer m.Close()
	x, y := make([]float32, slopes), make([]float32, actuators)
	for i := range x {
		x[i] = rng.Float32()
	}
	m.MulVec(y, x) // the first product pages the matrix in
	times := make([]float64, 15)
	for i := range times {
		t := time.Now()
		m.MulVec(y, x)
		times[i] = time.Since(t).Seconds()
	}
	slices.Sort(times)
	return times[len(times)/2], nil
}

// lockstepFrames returns how many frames of a phase fit in budget at the rate
// the loop ran its last frames (status s0 then s1, el apart), between lo and hi.
func lockstepFrames(s0, s1 *stillskyv1.GetStatusResponse, el, budget time.Duration, lo, hi int) int {
	rate := float64(s1.GetFrames()-s0.GetFrames()) / el.Seconds()
	return min(hi, max(lo, int(rate*budget.Seconds())))
}

// connected waits up to 30 s for the loop's first frame from the bench.
func connected(ctx context.Context, r *rig.Rig, gated bool) error {
	wait, cancel := context.WithTimeout(ctx, 30*time.Second)
	defer cancel()
	if gated {
		// A gated bench sends no sky frame before the run asks for it.
		if _, err := rig.WaitConnected(wait, r.Client); err != nil {
			return fmt.Errorf("demo: the loop did not connect to the bench: %w", err)
		}
		return nil
	}
	if _, err := r.WaitFrames(wait, 1); err != nil {
		return fmt.Errorf("demo: the loop did not connect to the bench: %w", err)
	}
	return nil
}

// framesFor watches the loop for a second and returns how many frames fit in
// budget at its rate, between lo and hi.
func framesFor(ctx context.Context, r *rig.Rig, budget time.Duration, lo, hi int) (int, error) {
	s0, err := r.Status(ctx)
	if err != nil {
		return 0, err
	}
	t0 := time.Now()
	select {
	case <-ctx.Done():
		return 0, ctx.Err()
	case <-time.After(time.Second):
	}
	s1, err := r.Status(ctx)
	if err != nil {
		return 0, err
	}
	return lockstepFrames(s0, s1, time.Since(t0), budget, lo, hi), nil
}

// The wall-clock budgets of the open and the closed phase after a fallback
// to lockstep: their default frames are sized to fit, and a machine that
// slows down further ends the phase at the budget.
const (
	openBudget   = 15 * time.Second
	closedBudget = 40 * time.Second
)

// lockstepSilence is how long the stale-camera interlock waits for a frame
// after a fallback to lockstep.
const lockstepSilence = 5 * time.Second

// phaseContext returns ctx, or, for a phase with a budget, ctx bounded by it.
func phaseContext(ctx context.Context, budgeted bool, budget time.Duration) (context.Context, context.CancelFunc) {
	if !budgeted {
		return context.WithCancel(ctx)
	}
	return context.WithTimeout(ctx, budget)
}

// budgetEnded turns the end of a phase's budget (its context's deadline, with
// the run's own ctx still live) into a normal end of the phase, said on out.
// The deadline shows either as the context's error or, when gRPC's own timer
// fires first, as a DeadlineExceeded status of the call in flight.
func budgetEnded(ctx context.Context, err error, out io.Writer) error {
	deadline := errors.Is(err, context.DeadlineExceeded) || status.Code(err) == codes.DeadlineExceeded
	if err != nil && ctx.Err() == nil && deadline {
		fmt.Fprintln(out, "  (phase ended at its lockstep time budget)")
		return nil
	}
	return err
}

// freeRunSilence is how long the stale-camera interlock of a free-running demo
// waits for a frame (at least the daemon's default of 20 frame periods).
const freeRunSilence = 100 * time.Millisecond

// fitClosedFrames sizes the closed phase to closedBudget at the pace of the
// settling frames run since status s0 (taken at t0), when its frames were not
// given (between 500 and the frames it had).
func (c *Config) fitClosedFrames(ctx context.Context, r *rig.Rig, s0 *stillskyv1.GetStatusResponse, t0 time.Time) error {
	if !c.scaleFrames[1] {
		return nil
	}
	s1, err := r.Status(ctx)
	if err != nil {
		return err
	}
	c.FramesClosed = lockstepFrames(s0, s1, time.Since(t0), closedBudget, 500, c.FramesClosed)
	return nil
}
