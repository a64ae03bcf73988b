package latency

import (
	"context"
	"encoding/json"
	"os"
	"path/filepath"
	"testing"
	"time"

	"stillsky/rig"
)

// A short run of the small scenario over a unix socket, with the bench in this
// process: every field of the JSON the issue names is filled with a sane value,
// and the latencies are ordered as their definitions require (compute ≤ rtc).
func TestRunReportsEveryFigure(t *testing.T) {
	if testing.Short() {
		t.Skip("calibrates and runs a closed loop")
	}
	rs, err := Run(context.Background(), Config{Scenarios: []string{"small"}, Duration: 500 * time.Millisecond, Block: 250 * time.Millisecond,
		Transports: []string{"unix"}, Camera: "prerendered"})
	if err != nil {
		t.Fatal(err)
	}
	if len(rs) != 1 {
		t.Fatalf("%d results, want 1", len(rs))
	}
	r := rs[0]
	if r.Scenario != "small" || r.Transport != "unix" || r.RateHz != 500 || r.Frames < 100 {
		t.Errorf("result %+v: want small over unix at 500 Hz with at least 100 frames", r)
	}
	for name, q := range map[string]rig.Quantiles{"compute": r.ComputeUs, "rtc": r.RTCUs, "end-to-end": r.EndToEndUs, "floor": r.FloorUs} {
		if !(q.P50 > 0 && q.P50 <= q.P99 && q.P99 <= q.P999 && q.P999 <= q.Max) {
			t.Errorf("%s quantiles %+v: want 0 < p50 ≤ p99 ≤ p99.9 ≤ max", name, q)
		}
	}
	if r.ComputeUs.P50 > r.RTCUs.P50 {
		t.Errorf("compute p50 %.1f µs above rtc p50 %.1f µs", r.ComputeUs.P50, r.RTCUs.P50)
	}
	if r.MaxRateHz <= 0 {
		t.Errorf("max rate %g Hz", r.MaxRateHz)
	}
	// Two pairs of blocks, loop then floor, each with its own figures.
	if r.Camera != "prerendered" || len(r.Blocks) != 4 {
		t.Fatalf("camera %q, %d blocks: want prerendered, 4", r.Camera, len(r.Blocks))
	}
	frames := 0
	for i, b := range r.Blocks {
		want := []string{"loop", "floor"}[i%2]
		if b.Kind != want || b.Samples < 50 || (i > 0 && b.StartS <= r.Blocks[i-1].StartS) {
			t.Errorf("block %d: %+v: want a %s block of at least 50 samples after the one before", i, b, want)
		}
		if (b.Kind == "loop") != (b.ComputeUs != nil && b.EndToEndUs != nil) || (b.Kind == "floor") != (b.FloorUs != nil) {
			t.Errorf("block %d (%s) has the figures of the other kind", i, b.Kind)
		}
		if b.Kind == "loop" {
			frames += b.Samples
		}
		// PSI counts waiting time in µs of wall time: a share from 0 to 100 %
		// where the kernel has it, −1 where it has not.
		if _, err := os.Stat(pressureFile); err == nil {
			if !(b.PressurePercent >= 0 && b.PressurePercent <= 100) {
				t.Errorf("block %d: cpu pressure %v %%, want 0–100 %%", i, b.PressurePercent)
			}
		} else if b.PressurePercent != -1 {
			t.Errorf("block %d: cpu pressure %v without %s, want -1", i, b.PressurePercent, pressureFile)
		}
	}
	if frames != r.Frames {
		t.Errorf("loop blocks hold %d frames, the result %d", frames, r.Frames)
	}
	path := filepath.Join(t.TempDir(), "bench.json")
	if err := WriteJSON(path, rs); err != nil {
		t.Fatal(err)
	}
	b, _ := os.ReadFile(path)
	var objs []map[string]any
	if err := json.Unmarshal(b, &objs); err != nil {
		t.Fatal(err)
	}
	for _, k := range []string{"scenario", "transport", "rate_hz", "frames", "compute_us", "rtc_us", "end_to_end_us", "floor_us", "arrival_jitter_us", "missed_deadlines", "max_rate_hz", "cpu_steal_percent", "cpu_pressure_percent", "camera", "blocks"} {
		if _, ok := objs[0][k]; !ok {
			t.Errorf("JSON lacks %q", k)
		}
	}
}

func TestRunRefusesBadConfig(t *testing.T) {
	for _, c := range []Config{{Duration: time.Millisecond}, {Rate: -1}, {Transports: []string{"carrier pigeon"}}, {Scenarios: []string{"nonesuch"}},
		{Camera: "pinhole"}, {Block: time.Millisecond}} {
		if _, err := Run(context.Background(), c); err == nil {
			t.Errorf("Run(%+v) accepted a bad configuration", c)
		}
	}
}
