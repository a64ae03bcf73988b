package ctl_test

import (
	"context"
	"io"
	"os"
	"path/filepath"
	"testing"
	"time"

	"stillsky/cmd/stillsky/internal/ctl"
	"stillsky/daemon"
	"stillsky/internal/cpustat"
	stillskyv1 "stillsky/proto/stillsky/v1"
	"stillsky/rig"
	"stillsky/sim/bench"
	"stillsky/sim/scenario"
)

// BenchmarkRecordingRTC measures, in one run, the loop's rtc latency (frame
// received → command sent) with a recording running and without: the default
// scenario free-running at 1 kHz, closed, alternating windows of
// STILLSKY_RECORD_WINDOW (default 3 s) without and with `ctl record` streaming
// every frame to a file, for b.N rounds. It reports the p50 and p99 of each and
// the ratio of the p99s (on / off), and the CPU steal during the run.
//
//	go test -run '^$' -bench RecordingRTC -benchtime 5x ./cmd/stillsky/internal/ctl/
func BenchmarkRecordingRTC(b *testing.B) {
	window := 3 * time.Second
	if s := os.Getenv("STILLSKY_RECORD_WINDOW"); s != "" {
		d, err := time.ParseDuration(s)
		if err != nil {
			b.Fatal(err)
		}
		window = d
	}
	scn, err := scenario.Load("default")
	if err != nil {
		b.Fatal(err)
	}
	ctx := context.Background()
	gain := 0.2
	rec := daemon.NewRecorder(int(window.Seconds()*scn.Loop.FrameRate*2.5)*(b.N+1) + 1000)
	r, err := rig.Start(ctx, rig.Config{Scenario: scn, Bench: bench.Options{IdlePriority: true},
		Loop: daemon.Config{Recorder: rec, Gain: &gain,
			Interlocks: daemon.Interlocks{DivergenceFactor: 1e6, SaturationFraction: 1, SaturationFrames: 1 << 30, StalePeriods: 1 << 20}}})
	if err != nil {
		b.Fatal(err)
	}
	defer r.Close()
	if _, err := r.WaitFrames(ctx, 10); err != nil {
		b.Fatal(err)
	}
	if _, err := rig.Calibrate(ctx, r.Client, &stillskyv1.CalibrateRequest{FramesPerPattern: 1}, nil); err != nil {
		b.Fatal(err)
	}
	if _, err := r.Client.CloseLoop(ctx, &stillskyv1.CloseLoopRequest{}); err != nil {
		b.Fatal(err)
	}
	time.Sleep(500 * time.Millisecond)
	path := filepath.Join(b.TempDir(), "bench.fits")
	var off, on []int64
	measure := func(during func()) []int64 {
		n := len(rec.Samples().RTC)
		rec.Start()
		during()
		rec.Stop()
		return rec.Samples().RTC[n:]
	}
	cpu0, e0 := cpustat.Read("/proc/stat")
	b.ResetTimer()
	for range b.N {
		off = append(off, measure(func() { time.Sleep(window) })...)
		on = append(on, measure(func() {
			frames := uint64(window.Seconds() * scn.Loop.FrameRate)
			if err := ctl.Record(ctx, r.Client, frames, path, io.Discard); err != nil {
				b.Error(err)
			}
		})...)
	}
	b.StopTimer()
	cpu1, e1 := cpustat.Read("/proc/stat")
	qoff, qon := rig.QuantilesOf(off), rig.QuantilesOf(on)
	if s, err := r.Status(ctx); err != nil || s.GetState() != stillskyv1.LoopState_LOOP_STATE_CLOSED {
		b.Fatalf("the loop left the closed state: %v %v", s.GetState(), err)
	}
	b.ReportMetric(qoff.P50, "off-p50-µs")
	b.ReportMetric(qoff.P99, "off-p99-µs")
	b.ReportMetric(qon.P50, "on-p50-µs")
	b.ReportMetric(qon.P99, "on-p99-µs")
	b.ReportMetric(qon.P99/qoff.P99, "p99-on/off")
	b.ReportMetric(float64(len(off)), "off-frames")
	b.ReportMetric(float64(len(on)), "on-frames")
	b.ReportMetric(cpustat.StealPercent(cpu0, cpu1, e0, e1), "steal-%")
}
