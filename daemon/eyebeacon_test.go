package daemon_test

import (
	"bytes"
	"context"
	"log/slog"
	"strings"
	"sync"
	"testing"
	"time"

	"stillsky/daemon"
	stillskyv1 "stillsky/proto/stillsky/v1"
	"stillsky/rig"
	"stillsky/sim/bench"
	"stillsky/sim/scenario"
)

// logBuffer collects a daemon's log for a test.
type logBuffer struct {
	mu  sync.Mutex
	buf bytes.Buffer
}

func (b *logBuffer) Write(p []byte) (int, error) {
	b.mu.Lock()
	defer b.mu.Unlock()
	return b.buf.Write(p)
}

func (b *logBuffer) String() string {
	b.mu.Lock()
	defer b.mu.Unlock()
	return b.buf.String()
}

// TestEyeBeaconThroughDescribe runs the eye scenario's bench and the loop
// daemon over loopback gRPC. The bench's camera declares its beacon in
// Describe (retinal_beacon: 1e-5 W for 600 s, limit 0.01 J, from the
// scenario). A daemon with no beacon flags reads those figures and runs; a
// daemon whose own limit is 0.005 J — below the 0.006 J the camera declares,
// although the operator declared a weaker beacon that passes it — refuses the
// camera by the device's figures before streaming a frame, naming the fields
// and the limit. (The check is indicative only: ANSI Z136.1 and ISO 15004-2
// set the limits.)
func TestEyeBeaconThroughDescribe(t *testing.T) {
	scn, err := scenario.Load("eye")
	if err != nil {
		t.Fatal(err)
	}
	for _, c := range []struct {
		name    string
		beacon  *daemon.Beacon
		refused bool
		want    string
	}{
		{"device figures within its limit", nil, false, "retinal beacon declared by the camera"},
		{"daemon limit below the device's exposure", &daemon.Beacon{PowerW: 1e-6, ExposureS: 600, LimitJ: 0.005}, true,
			"camera retinal_beacon.power_w 1e-05 W × retinal_beacon.exposure_s 600 s = 0.006 J exceeds exposure-limit-j (the daemon's) 0.005 J"},
	} {
		t.Run(c.name, func(t *testing.T) {
			var log logBuffer
			ctx := context.Background()
			r, err := rig.Start(ctx, rig.Config{Scenario: scn, Bench: bench.Options{Lockstep: true},
				Loop: daemon.Config{Beacon: c.beacon, Logger: slog.New(slog.NewTextHandler(&log, nil))}})
			if err != nil {
				t.Fatal(err)
			}
			defer r.Close()
			if !c.refused {
				wctx, cancel := context.WithTimeout(ctx, 60*time.Second)
				defer cancel()
				if _, err := rig.WaitFrames(wctx, r.Client, 1); err != nil {
					t.Fatalf("no frame from the eye camera: %v\n%s", err, log.String())
				}
				if l := log.String(); !strings.Contains(l, c.want) || !strings.Contains(l, "power_w=1e-05") || !strings.Contains(l, "exposure_limit_j=0.01") {
					t.Errorf("log does not show the camera's beacon figures:\n%s", l)
				}
				return
			}
			deadline := time.Now().Add(60 * time.Second)
			for !strings.Contains(log.String(), c.want) {
				if time.Now().After(deadline) {
					t.Fatalf("no refusal naming %q in the log:\n%s", c.want, log.String())
				}
				time.Sleep(20 * time.Millisecond)
			}
			if !strings.Contains(log.String(), "retinal exposure above the configured limit") {
				t.Errorf("refusal does not say it is the exposure limit:\n%s", log.String())
			}
			st, err := r.Client.GetStatus(ctx, &stillskyv1.GetStatusRequest{})
			if err != nil {
				t.Fatal(err)
			}
			if st.GetCameraConnected() || st.GetFrames() != 0 {
				t.Errorf("refused camera: connected %v, %d frames; want not connected, none", st.GetCameraConnected(), st.GetFrames())
			}
		})
	}
}
