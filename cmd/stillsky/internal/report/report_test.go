package report_test

import (
	"context"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strings"
	"testing"
	"time"

	"stillsky/cmd/stillsky/internal/ctl"
	"stillsky/cmd/stillsky/internal/report"
	"stillsky/internal/recording"
	"stillsky/internal/testtool"
	stillskyv1 "stillsky/proto/stillsky/v1"
	"stillsky/rig"
	"stillsky/sim/bench"
	"stillsky/sim/scenario"
)

// recordSmall records frames frames of the small scenario's closed loop
// (lockstep, gain 0.3) into dir.
func recordSmall(t *testing.T, dir string, frames uint64) string {
	t.Helper()
	scn, err := scenario.Load("small")
	if err != nil {
		t.Fatal(err)
	}
	ctx := context.Background()
	r, err := rig.Start(ctx, rig.Config{Scenario: scn, Bench: bench.Options{Lockstep: true}})
	if err != nil {
		t.Fatal(err)
	}
	defer r.Close()
	if _, err := r.WaitFrames(ctx, 1); err != nil {
		t.Fatal(err)
	}
	if _, err := rig.Calibrate(ctx, r.Client, &stillskyv1.CalibrateRequest{}, nil); err != nil {
		t.Fatal(err)
	}
	if _, err := r.Client.SetGain(ctx, &stillskyv1.SetGainRequest{Gain: 0.3}); err != nil {
		t.Fatal(err)
	}
	if _, err := r.Client.CloseLoop(ctx, &stillskyv1.CloseLoopRequest{}); err != nil {
		t.Fatal(err)
	}
	if _, err := r.WaitFrames(ctx, 100); err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(dir, "run.fits")
	if err := ctl.Record(ctx, r.Client, frames, path, os.Stderr); err != nil {
		t.Fatal(err)
	}
	return path
}

// imageCheck, appended to a copy of the page, lists every image once the page
// has loaded: its source and whether it decoded (naturalWidth > 0).
const imageCheck = `<script>
window.addEventListener("load", () => {
  const out = document.createElement("pre");
  out.id = "image-check";
  out.textContent = Array.from(document.images).map(i => i.getAttribute("src") + " " + (i.complete && i.naturalWidth > 0 ? "loaded" : "broken")).join("\n");
  document.body.appendChild(out);
});
</script>`

func TestReport(t *testing.T) {
	dir := t.TempDir()
	path := recordSmall(t, dir, 2048)
	out := filepath.Join(dir, "report")
	var msg strings.Builder
	if err := report.Write(path, out, &msg); err != nil {
		t.Fatal(err)
	}
	html, err := os.ReadFile(filepath.Join(out, "index.html"))
	if err != nil {
		t.Fatal(err)
	}
	srcs := regexp.MustCompile(`<img src="([^"]+)"`).FindAllStringSubmatch(string(html), -1)
	want := []string{"latency-rtc.png", "latency-compute.png", "latency-camera.png", "residual.png", "strehl.png", "modal-variance.png", "rejection.png"}
	if len(srcs) != len(want) {
		t.Fatalf("page shows %d images, want %d: %v", len(srcs), len(want), srcs)
	}
	for i, s := range srcs {
		if s[1] != want[i] || strings.Contains(s[1], "/") {
			t.Errorf("image %d: %q, want %q beside the page", i, s[1], want[i])
		}
	}
	if !strings.Contains(string(html), "r0 at 500 nm") || !strings.Contains(string(html), "extension TURBULENCE") {
		t.Error("the page lacks the turbulence estimates or the note that the file stores them")
	}

	t.Run("chromium", func(t *testing.T) {
		// Headless Chromium (Debian package chromium) renders the page from the
		// directory alone, off the network, and decodes every image.
		chromium := testtool.Require(t, "chromium", "chromium")
		check := filepath.Join(out, "check.html")
		page := strings.Replace(string(html), "</body>", imageCheck+"</body>", 1)
		if err := os.WriteFile(check, []byte(page), 0o644); err != nil {
			t.Fatal(err)
		}
		ctx, cancel := context.WithTimeout(context.Background(), 60*time.Second)
		defer cancel()
		dom, err := exec.CommandContext(ctx, chromium,
			"--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
			"--disable-background-networking", "--disable-component-update", "--disable-sync",
			"--disable-dev-shm-usage", "--user-data-dir="+filepath.Join(dir, "profile"),
			"--virtual-time-budget=5000", "--dump-dom", "file://"+check).Output()
		if err != nil {
			t.Fatalf("chromium: %v", err)
		}
		m := regexp.MustCompile(`(?s)<pre id="image-check">(.*?)</pre>`).FindSubmatch(dom)
		if m == nil {
			t.Fatalf("the image check did not run:\n%.2000s", dom)
		}
		lines := strings.Split(strings.TrimSpace(string(m[1])), "\n")
		if len(lines) != len(want) {
			t.Fatalf("chromium saw %d images, want %d: %q", len(lines), len(want), lines)
		}
		for _, l := range lines {
			if !strings.HasSuffix(l, " loaded") {
				t.Errorf("chromium: %s", l)
			}
		}
	})

	t.Run("rejection", func(t *testing.T) {
		// The measured rejection (closed over pseudo-open-loop spectra) follows
		// the leaky integrator's |E(f)|² (standard discrete-time control; the
		// model is analysis.Loop) over the band where both are well measured.
		rec, err := recording.ReadFile(path)
		if err != nil {
			t.Fatal(err)
		}
		st, err := report.NewStudy(rec)
		if err != nil {
			t.Fatal(err)
		}
		meas, err := st.Rejection()
		if err != nil {
			t.Fatal(err)
		}
		rate := st.Loop.FrameRate
		worst := 0.0
		for i, f := range meas.Freq {
			if f < 0.05*rate || f > 0.45*rate {
				continue
			}
			worst = max(worst, math.Abs(math.Log(meas.Power[i]/st.Loop.RejectionPower(f))))
		}
		if worst > math.Log(1.5) {
			t.Errorf("measured rejection differs from |E(f)|² by a factor %.2f between %.0f and %.0f Hz; want within 1.5", math.Exp(worst), 0.05*rate, 0.45*rate)
		}
		t.Logf("measured rejection within a factor %.2f of |E(f)|² from %.0f to %.0f Hz (gain %.2f, delay %d)", math.Exp(worst), 0.05*rate, 0.45*rate, st.Loop.Gain, st.Loop.Delay)
	})
}

// Missing, truncated and foreign files are refused with one line.
func TestReportRefuses(t *testing.T) {
	dir := t.TempDir()
	bad := filepath.Join(dir, "notes.fits")
	os.WriteFile(bad, []byte("SIMPLE  =                    T"), 0o644)
	for _, p := range []string{filepath.Join(dir, "none.fits"), bad} {
		err := report.Write(p, filepath.Join(dir, "out"), os.Stderr)
		if err == nil || strings.Contains(err.Error(), "\n") {
			t.Errorf("report of %s: %v, want a one-line error", p, err)
		}
	}
}
