package daemon_test

import (
	"context"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"runtime"
	"strings"
	"testing"
	"time"

	"stillsky/daemon"
	"stillsky/internal/rpc"
	stillskyv1 "stillsky/proto/stillsky/v1"
	"stillsky/sim/scenario"
)

// TestHotPathAllocationsPixels is TestHotPathAllocations in pixel mode: the
// bench in its own process streams the small scenario's pixel frames (8×8
// windows of 8 pixels, 4 KiB a chunk) in two row chunks, and this process —
// the daemon — decodes, centroids and multiplies them chunk by chunk with the
// loop closed. No site of the project may allocate per frame; what remains is
// gRPC-Go's per-message floor (perFrameSites), two messages in per frame.
func TestHotPathAllocationsPixels(t *testing.T) {
	if testing.Short() {
		t.Skip("builds the binary and runs a closed loop")
	}
	dir := t.TempDir()
	bin := filepath.Join(dir, "stillsky")
	if out, err := exec.Command("go", "build", "-o", bin, "stillsky/cmd/stillsky").CombinedOutput(); err != nil {
		t.Fatalf("go build: %v\n%s", err, out)
	}
	s, err := scenario.Load("small")
	if err != nil {
		t.Fatal(err)
	}
	s.Name = "small-pixels"
	// A bright star: at the small scenario's magnitude 9 (44 e⁻ a window) noise
	// peaks in faint windows get frames refused as hot pixels now and then,
	// and a refused frame, answered by no command, stalls a lockstep bench
	// for its timeout.
	s.GuideStar.Magnitude = 5
	s.WFS.Pixels = &scenario.Pixels{PixelsPerSubaperture: 8, PixelScale: s.GuideStar.Wavelength / (2 * s.SubapertureSize()),
		ReadNoise: 1, Background: 0.5, Bias: 100, FlatSeed: 1, FullWell: 60000, Gain: 1, Centroid: scenario.CentroidCoG, Threshold: 0.05}
	yml, err := s.YAML()
	if err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(dir, "small-pixels.yaml")
	if err := os.WriteFile(path, yml, 0o644); err != nil {
		t.Fatal(err)
	}
	cam, mir := "unix:"+filepath.Join(dir, "cam.sock"), "unix:"+filepath.Join(dir, "mir.sock")
	sim := exec.Command(bin, "sim", "--scenario", path, "--lockstep", "--camera", cam, "--mirror", mir, "--metrics", "", "--log-level", "warn")
	if err := sim.Start(); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { sim.Process.Kill(); sim.Wait() })
	d, err := daemon.New(daemon.Config{CameraAddr: cam, MirrorAddr: mir, ListenAddr: "127.0.0.1:0", MetricsAddr: "-", Chunks: 2})
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- d.Run(ctx) }()
	t.Cleanup(func() { cancel(); <-done })
	conn, err := rpc.Dial(d.ControlAddr())
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close()
	c := stillskyv1.NewControlServiceClient(conn)
	r := &loopRig{client: c}
	r.waitFrames(t, 10)
	r.calibrate(t)
	if _, err := c.CloseLoop(ctx, &stillskyv1.CloseLoopRequest{}); err != nil {
		t.Fatal(err)
	}
	r.waitFrames(t, 200)
	defer func(rate int) { runtime.MemProfileRate = rate }(runtime.MemProfileRate)
	runtime.MemProfileRate = 1
	r.waitFrames(t, 50)
	var m0, m1 runtime.MemStats
	s0 := r.status(t)
	runtime.GC()
	p0 := memProfile()
	runtime.ReadMemStats(&m0)
	time.Sleep(2 * time.Second)
	runtime.ReadMemStats(&m1)
	runtime.GC()
	p1 := memProfile()
	s1 := r.status(t)
	frames := s1.GetFrames() - s0.GetFrames()
	if rej := s1.GetFramesRejected() - s0.GetFramesRejected(); rej != 0 || s1.GetState() != stillskyv1.LoopState_LOOP_STATE_CLOSED {
		t.Fatalf("state %v, %d frames refused in the window; trips %v, last trip %q", s1.GetState(), rej, s1.GetInterlockTrips(), s1.GetLastInterlock())
	}
	perFrame := float64(m1.Mallocs-m0.Mallocs) / float64(frames)
	t.Logf("%d pixel frames (2 chunks each), %.3f heap allocations and %.0f bytes per frame", frames, perFrame,
		float64(m1.TotalAlloc-m0.TotalAlloc)/float64(frames))
	var report strings.Builder
	for _, s := range allocSites(p0, p1) {
		rate := float64(s.objects) / float64(frames)
		fmt.Fprintf(&report, "\n  %7.4f objects/frame  %s", rate, s.site)
		if strings.HasPrefix(s.site, "stillsky/") && rate > 0.02 {
			t.Errorf("%s allocates %.3f objects per pixel frame: the project's frame code must allocate nothing", s.site, rate)
		}
		if !perFrameSite(s.site) && !strings.HasPrefix(s.site, "stillsky/") && rate > 0.5 {
			t.Errorf("%s allocates %.3f objects per pixel frame beside gRPC's per-message floor", s.site, rate)
		}
	}
	t.Logf("sites:%s", report.String())
	// gRPC's floor: one object per message received (two chunks) and three per
	// command sent; its control frames add a few hundredths.
	if bytes := float64(m1.TotalAlloc-m0.TotalAlloc) / float64(frames); perFrame > 5.2 || bytes > 1000 {
		t.Errorf("%.3f allocations and %.0f bytes per pixel frame, want at most 5.2 (gRPC's 2 + 3 per-message floor and its control frames) and 1000", perFrame, bytes)
	}
}
