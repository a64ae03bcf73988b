package daemon_test

import (
	"bytes"
	"context"
	"io"
	"net/http"
	"os"
	"testing"
	"time"

	dto "github.com/prometheus/client_model/go"
	"github.com/prometheus/common/expfmt"
	"github.com/prometheus/common/model"
	"google.golang.org/grpc"

	"stillsky/daemon"
	stillskyv1 "stillsky/proto/stillsky/v1"
	"stillsky/rig"
	"stillsky/sim/bench"
	"stillsky/sim/scenario"
)

// TestMain gives the tests the process settings of a loop process (GOGC 400 and
// the soft memory limit, see ProcessSettings), under which the timing and memory
// figures they check are taken.
func TestMain(m *testing.M) {
	daemon.ProcessSettings(daemon.Realtime{}, nil)
	os.Exit(m.Run())
}

// loopRig is a loop daemon under test and its Control API client; startRig
// runs it with a bench, as separate gRPC endpoints on loopback.
type loopRig struct {
	bench  *bench.Server
	d      *daemon.Daemon
	client stillskyv1.ControlServiceClient
	conn   *grpc.ClientConn
	rig    *rig.Rig
}

func startRig(t *testing.T, name string, opt bench.Options, cfg daemon.Config) *loopRig {
	t.Helper()
	scn, err := scenario.Load(name)
	if err != nil {
		t.Fatal(err)
	}
	rg, err := rig.Start(context.Background(), rig.Config{Scenario: scn, Bench: opt, Loop: cfg, BenchHTTP: true})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() {
		if err := rg.Close(); err != nil {
			t.Errorf("shutdown: %v", err)
		}
	})
	r := &loopRig{bench: rg.Bench, d: rg.Loop, client: rg.Client, conn: rg.Conn, rig: rg}
	r.waitFrames(t, 1)
	return r
}

func (r *loopRig) status(t *testing.T) *stillskyv1.GetStatusResponse {
	t.Helper()
	s, err := r.client.GetStatus(context.Background(), &stillskyv1.GetStatusRequest{})
	if err != nil {
		t.Fatal(err)
	}
	return s
}

// waitFrames waits until n more frames have been received.
func (r *loopRig) waitFrames(t *testing.T, n uint64) *stillskyv1.GetStatusResponse {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), 60*time.Second)
	defer cancel()
	s, err := rig.WaitFrames(ctx, r.client, n)
	if err != nil {
		t.Fatal(err)
	}
	return s
}

func (r *loopRig) calibrate(t *testing.T) {
	t.Helper()
	if _, err := rig.Calibrate(context.Background(), r.client, &stillskyv1.CalibrateRequest{}, nil); err != nil {
		t.Fatalf("calibrate: %v", err)
	}
}

// TestClosedLoopRaisesStrehl calibrates the default scenario through the Control
// API and closes the loop in lockstep. Open loop, the short-exposure H-band Strehl
// of a 3.6 m pupil at D/r0 ≈ 7 is of order (r0/D)² ≈ 0.02 (Noll 1976: σ² = 1.03
// (D/r0)^(5/3) ≈ 28 rad², far beyond Maréchal); closed loop the budget is the fitting
// error a_F (d/r0)^(5/3) ≈ 0.28·(0.15/0.50)^(5/3) ≈ 0.04 rad² (Hudgin 1977, from
// memory) plus servo lag and noise, so S ≥ 0.5 with margin. The test asks for
// S_open ≤ 0.05, S_closed ≥ 0.5 and a rise by at least 10×.
func TestClosedLoopRaisesStrehl(t *testing.T) {
	if testing.Short() {
		t.Skip("closed-loop integration takes ~20 s")
	}
	r := startRig(t, scenario.Default, bench.Options{Lockstep: true}, daemon.Config{})
	r.calibrate(t)
	if s := r.status(t); s.GetReconstructor() == nil || s.GetReconstructor().GetModesKept() == 0 {
		t.Fatalf("no reconstructor after calibration: %v", s.GetReconstructor())
	}
	// A long exposure needs many tilt coherence times: 3000 frames is 3 s of sky
	// (shorter open-loop exposures of this pupil scatter up to about 0.05).
	r.bench.ResetStats()
	r.waitFrames(t, 3000)
	open := r.bench.Stats()
	if _, err := r.client.CloseLoop(context.Background(), &stillskyv1.CloseLoopRequest{}); err != nil {
		t.Fatal(err)
	}
	r.waitFrames(t, 100)
	r.bench.ResetStats()
	st := r.waitFrames(t, 600)
	closed := r.bench.Stats()
	t.Logf("true H-band Strehl open %.4f closed %.4f (residual %.0f → %.0f nm); estimate %.3f",
		open.Strehl, closed.Strehl, open.ResidualRMS*1e9, closed.ResidualRMS*1e9, st.GetStrehlEstimate())
	if open.Strehl > 0.05 {
		t.Errorf("open-loop Strehl %.3f, want <= 0.05", open.Strehl)
	}
	if closed.Strehl < 0.5 {
		t.Errorf("closed-loop Strehl %.3f, want >= 0.5", closed.Strehl)
	}
	if closed.Strehl < 10*open.Strehl {
		t.Errorf("Strehl rose by %.1f×, want >= 10×", closed.Strehl/open.Strehl)
	}
	if st.GetState() != stillskyv1.LoopState_LOOP_STATE_CLOSED {
		t.Errorf("state %v, want closed", st.GetState())
	}
	checkMetrics(t, r.d.MetricsAddr())
}

// TestPipelinedReconstruction sends every frame in 4 chunks of subaperture rows;
// the daemon multiplies each chunk's columns as it arrives. The control law is the
// same, so the closed loop must reach the same Strehl band as whole frames.
func TestPipelinedReconstruction(t *testing.T) {
	if testing.Short() {
		t.Skip("closed-loop integration takes ~15 s")
	}
	r := startRig(t, scenario.Default, bench.Options{Lockstep: true}, daemon.Config{Chunks: 4})
	r.calibrate(t)
	if _, err := r.client.CloseLoop(context.Background(), &stillskyv1.CloseLoopRequest{}); err != nil {
		t.Fatal(err)
	}
	r.waitFrames(t, 100)
	r.bench.ResetStats()
	st := r.waitFrames(t, 600)
	closed := r.bench.Stats()
	t.Logf("chunked frames: true H-band Strehl closed %.3f, %d frames rejected", closed.Strehl, st.GetFramesRejected())
	if closed.Strehl < 0.5 {
		t.Errorf("closed-loop Strehl with chunked frames %.3f, want >= 0.5", closed.Strehl)
	}
	if st.GetFramesRejected() != 0 || st.GetState() != stillskyv1.LoopState_LOOP_STATE_CLOSED {
		t.Errorf("state %v with %d rejected frames", st.GetState(), st.GetFramesRejected())
	}
}

// checkMetrics parses /metrics with the Prometheus text parser and checks that the
// families of the metrics contract are present with sane values.
func checkMetrics(t *testing.T, addr string) {
	t.Helper()
	resp, err := http.Get("http://" + addr + "/metrics")
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	body, _ := io.ReadAll(resp.Body)
	parser := expfmt.NewTextParser(model.UTF8Validation)
	fams, err := parser.TextToMetricFamilies(bytes.NewReader(body))
	if err != nil {
		t.Fatalf("parsing /metrics: %v", err)
	}
	get := func(name string) *dto.MetricFamily {
		f, ok := fams[name]
		if !ok {
			t.Errorf("metric family %s missing", name)
			return nil
		}
		return f
	}
	value := func(name string) float64 {
		f := get(name)
		if f == nil || len(f.GetMetric()) == 0 {
			return -1
		}
		m := f.GetMetric()[0]
		switch {
		case m.GetCounter() != nil:
			return m.GetCounter().GetValue()
		case m.GetGauge() != nil:
			return m.GetGauge().GetValue()
		}
		return -1
	}
	if v := value("stillsky_frames_total"); v < 1000 {
		t.Errorf("stillsky_frames_total = %g, want >= 1000", v)
	}
	// The bench reports the guide star's photo-electrons with every frame; the
	// daemon's decoder must carry them to the gauge.
	if v := value("stillsky_guide_star_flux_electrons"); !(v > 0) {
		t.Errorf("stillsky_guide_star_flux_electrons = %g, want the camera's flux, > 0", v)
	}
	for _, h := range []string{"stillsky_rtc_latency_seconds", "stillsky_compute_latency_seconds", "stillsky_end_to_end_latency_seconds"} {
		f := get(h)
		if f == nil {
			continue
		}
		hist := f.GetMetric()[0].GetHistogram()
		if hist.GetSampleCount() < 100 || !(hist.GetSampleSum() > 0) {
			t.Errorf("%s: %d samples summing to %g s", h, hist.GetSampleCount(), hist.GetSampleSum())
		}
		if mean := hist.GetSampleSum() / float64(hist.GetSampleCount()); mean > 0.1 {
			t.Errorf("%s: mean %g s is not a plausible latency", h, mean)
		}
	}
	if v := value("stillsky_strehl_estimate_ratio"); !(v > 0 && v <= 1) {
		t.Errorf("stillsky_strehl_estimate_ratio = %g, want in (0, 1]", v)
	}
	if v := value("stillsky_residual_wavefront_rms_meters"); !(v > 0 && v < 1e-5) {
		t.Errorf("stillsky_residual_wavefront_rms_meters = %g", v)
	}
	if v := value("stillsky_residual_slope_rms_radians"); !(v > 0 && v < 1e-3) {
		t.Errorf("stillsky_residual_slope_rms_radians = %g", v)
	}
	if v := value("stillsky_frame_period_seconds"); v != 1e-3 {
		t.Errorf("stillsky_frame_period_seconds = %g, want 0.001", v)
	}
	if v := value("stillsky_loop_gain"); v != 0.4 {
		t.Errorf("stillsky_loop_gain = %g, want the default 0.4", v)
	}
	for _, n := range []string{"stillsky_frames_dropped_total", "stillsky_frames_rejected_total", "stillsky_saturated_actuators",
		"stillsky_loop_leak", "stillsky_build_info", "stillsky_actuators", "stillsky_stroke_used_ratio", "stillsky_commands_total"} {
		get(n)
	}
	if f := get("stillsky_loop_state"); f != nil {
		on := ""
		for _, m := range f.GetMetric() {
			if m.GetGauge().GetValue() == 1 {
				on = m.GetLabel()[0].GetValue()
			}
		}
		if on != "closed" {
			t.Errorf("stillsky_loop_state marks %q, want closed", on)
		}
	}
}
