package sweep

import (
	"bytes"
	"context"
	"encoding/csv"
	"fmt"
	"image/png"
	"io"
	"math"
	"os"
	"path/filepath"
	"reflect"
	"strings"
	"testing"

	batchv1 "k8s.io/api/batch/v1"
	corev1 "k8s.io/api/core/v1"
	k8syaml "sigs.k8s.io/yaml"

	"stillsky/sim/scenario"
)

func TestParseRefusesBadSpecs(t *testing.T) {
	for _, c := range []struct {
		name, spec, want string
	}{
		{"unknown key", "scenario: small\ngrids: {gain: [0.1]}\n", "grids: line 2: unknown key"},
		{"wrong type", "scenario: small\nframes_open: many\ngrid: {gain: [0.1]}\n", "many"},
		{"unknown field", "scenario: small\ngrid: {atmosphere.r0: [0.1]}\n", "atmosphere.r0"},
		{"unknown section", "scenario: small\ngrid: {gains: [0.1]}\n", "gains"},
		{"bad index", "scenario: small\ngrid:\n  atmosphere.layers[5].fraction: [0.1]\n", "atmosphere.layers[5].fraction"},
		{"not a value", "scenario: small\ngrid: {atmosphere.layers: [1]}\n", "atmosphere.layers"},
		{"empty axis", "scenario: small\ngrid:\n  gain: [0.2]\n  atmosphere.r0_m: []\n", "grid.atmosphere.r0_m: line 4: empty axis"},
		{"axis not a list", "scenario: small\ngrid: {gain: 0.2}\n", "grid.gain"},
		{"gain out of range", "scenario: small\ngrid: {gain: [0.2, 2.0]}\n", "grid.gain[1]: line 2: gain 2 out of range [0, 2)"},
		{"gain not a number", "scenario: small\ngrid: {gain: [high]}\n", "grid.gain[0]"},
		{"r0 out of range", "scenario: small\ngrid: {atmosphere.r0_m: [0.1, 6]}\n", "atmosphere.r0_m"},
		{"magnitude out of range", "scenario: small\npoints:\n  - {gain: 0.3}\n  - {guide_star.magnitude: 40}\n", "point 1 (guide_star.magnitude=40): scenario: guide_star.magnitude"},
		{"frame rate out of range", "scenario: small\ngrid: {loop.frame_rate_hz: [500, 0]}\n", "loop.frame_rate_hz"},
		{"fractional integer", "scenario: small\ngrid: {loop.delay_frames: [1, 1.5]}\n", "loop.delay_frames"},
		{"no delay", "scenario: small\ngrid: {loop.delay_frames: [0]}\n", "loop.delay_frames 0"},
		{"string field", "scenario: small\ngrid: {wfs.mode: [3]}\n", "grid.wfs.mode[0]"},
		{"string for number", "scenario: small\ngrid: {atmosphere.r0_m: [small]}\n", "grid.atmosphere.r0_m[0]"},
		{"both", "scenario: small\ngrid: {gain: [0.1]}\npoints: [{gain: 0.2}]\n", "not both"},
		{"nothing", "scenario: small\n", "nothing to run"},
		{"empty list", "scenario: small\npoints: []\n", "points: empty list"},
		{"duplicate axis", "scenario: small\ngrid:\n  gain: [0.1]\n  gain: [0.2]\n", "gain"},
		{"set and grid", "scenario: small\nset: {gain: 0.3}\ngrid: {gain: [0.1]}\n", "set.gain: also varied"},
		{"fractional frames", "scenario: small\nframes_open: 10.5\ngrid: {gain: [0.1]}\n", "frames_open: line 2"},
		{"frames", "scenario: small\nframes_closed: 0\ngrid: {gain: [0.1]}\n", "frames_closed"},
		{"bad scenario", "scenario: nowhere.yaml\ngrid: {gain: [0.1]}\n", "nowhere.yaml"},
		{"bad name", "name: My Sweep\nscenario: small\ngrid: {gain: [0.1]}\n", "name"},
	} {
		t.Run(c.name, func(t *testing.T) {
			_, err := Parse([]byte(c.spec), "test", t.TempDir())
			if err == nil {
				t.Fatalf("accepted:\n%s", c.spec)
			}
			if !strings.Contains(err.Error(), c.want) {
				t.Errorf("error %q does not name %q", err, c.want)
			}
			if strings.Contains(err.Error(), "\n") {
				t.Errorf("error is not one line: %q", err)
			}
		})
	}
}

func TestGridExpandsInOrder(t *testing.T) {
	spec := `
scenario: small
frames_open: 10
frames_closed: 20
set: {atmosphere.seed: 42}
grid:
  gain: [0.2, 0.5]
  atmosphere.r0_m: [0.08, 0.1, 0.15]
  atmosphere.layers[1].wind_speed_m_per_s: [20]
`
	s, err := Parse([]byte(spec), "grid", ".")
	if err != nil {
		t.Fatal(err)
	}
	if len(s.Points) != 6 || s.FramesOpen != 10 || s.FramesClosed != 20 || s.Name != "grid" {
		t.Fatalf("%d points, frames %d/%d, name %q", len(s.Points), s.FramesOpen, s.FramesClosed, s.Name)
	}
	for i, p := range s.Points {
		wantGain, wantR0 := []float64{0.2, 0.5}[i/3], []float64{0.08, 0.1, 0.15}[i%3]
		if p.Index != i || *p.Gain != wantGain || len(p.Settings) != 3 || p.Settings[1].Value != wantR0 {
			t.Errorf("point %d: index %d gain %v settings %v: want gain %v r0 %v", i, p.Index, *p.Gain, p.Settings, wantGain, wantR0)
		}
		scn, err := scenario.Parse(p.Scenario)
		if err != nil {
			t.Fatal(err)
		}
		if scn.Atmosphere.R0 != wantR0 || scn.Atmosphere.Seed != 42 || scn.Atmosphere.Layers[1].WindSpeed != 20 ||
			scn.Atmosphere.Layers[0].WindSpeed != 5 || scn.Name != "small" {
			t.Errorf("point %d: scenario r0 %v seed %d winds %v/%v", i, scn.Atmosphere.R0, scn.Atmosphere.Seed,
				scn.Atmosphere.Layers[0].WindSpeed, scn.Atmosphere.Layers[1].WindSpeed)
		}
	}
}

// TestStabilityLimit checks the formula against its values for 1, 2 and 3
// frames of delay (Jury criterion on z^d (z − 1) + g = 0, standard discrete-time
// control).
func TestStabilityLimit(t *testing.T) {
	for d, want := range map[int]float64{1: 2, 2: 1, 3: 0.618} {
		t.Run(fmt.Sprintf("delay-%d", d), func(t *testing.T) {
			if got := StabilityLimit(d); math.Abs(got-want) > 5e-4 {
				t.Errorf("d = %d: %v, want %v", d, got, want)
			}
		})
	}
	if !math.IsNaN(StabilityLimit(0)) {
		t.Error("no limit for d = 0")
	}
}

// TestManifests decodes the written manifests strictly into the Kubernetes API
// types and checks an Indexed Job with one completion per point, Guaranteed QoS
// (every container's limits equal its requests for CPU and memory: Kubernetes
// documentation, "Configure Quality of Service for Pods"), and a ConfigMap whose
// spec gives the same points inside the pod.
func TestManifests(t *testing.T) {
	dir := t.TempDir()
	specPath := filepath.Join(dir, "study.yaml")
	// A scenario file of our own, so the ConfigMap must carry it.
	base, err := scenario.Load("small")
	if err != nil {
		t.Fatal(err)
	}
	y, _ := base.YAML()
	if err := os.WriteFile(filepath.Join(dir, "mine.yaml"), y, 0o644); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(specPath, []byte("scenario: mine.yaml\ngrid:\n  gain: [0.2, 0.4, 0.6]\n  guide_star.magnitude: [8, 12]\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	s, err := Load(specPath)
	if err != nil {
		t.Fatal(err)
	}
	paths, err := WriteManifests(s, KubeOptions{CPU: "2", Memory: "768Mi", Parallelism: 4}, filepath.Join(dir, "k8s"))
	if err != nil {
		t.Fatal(err)
	}
	var cm corev1.ConfigMap
	var job batchv1.Job
	for i, target := range []any{&cm, &job} {
		data, err := os.ReadFile(paths[i])
		if err != nil {
			t.Fatal(err)
		}
		if err := k8syaml.UnmarshalStrict(data, target); err != nil {
			t.Fatalf("%s: %v", paths[i], err)
		}
	}
	if cm.Kind != "ConfigMap" || job.Kind != "Job" || job.APIVersion != "batch/v1" || cm.Namespace != "stillsky" || job.Name != "sweep-study" {
		t.Fatalf("kinds %s %s/%s, namespace %s, name %s", cm.Kind, job.APIVersion, job.Kind, cm.Namespace, job.Name)
	}
	js := job.Spec
	if js.CompletionMode == nil || *js.CompletionMode != batchv1.IndexedCompletion || *js.Completions != 6 || *js.Parallelism != 4 {
		t.Errorf("completion mode %v, completions %d, parallelism %d: want Indexed, 6, 4", js.CompletionMode, *js.Completions, *js.Parallelism)
	}
	if js.BackoffLimitPerIndex == nil || js.PodFailurePolicy == nil || js.PodFailurePolicy.Rules[0].OnExitCodes.Values[0] != ExitPointFailed {
		t.Error("a failed point should fail its index, not be retried")
	}
	pod := js.Template.Spec
	if pod.RestartPolicy != corev1.RestartPolicyNever {
		t.Errorf("restart policy %s: a pod failure policy needs Never", pod.RestartPolicy)
	}
	if len(pod.Containers) != 1 {
		t.Fatalf("%d containers", len(pod.Containers))
	}
	c := pod.Containers[0]
	for _, r := range []corev1.ResourceName{corev1.ResourceCPU, corev1.ResourceMemory} {
		req, lim := c.Resources.Requests[r], c.Resources.Limits[r]
		if req.IsZero() || req.Cmp(lim) != 0 {
			t.Errorf("%s: request %s, limit %s: Guaranteed QoS needs them equal", r, req.String(), lim.String())
		}
	}
	if got := strings.Join(c.Args, " "); got != "sweep --point-from-env --out /results/study /etc/stillsky/sweep/sweep.yaml" {
		t.Errorf("args %q", got)
	}
	mounts := map[string]string{}
	for _, m := range c.VolumeMounts {
		mounts[m.Name] = m.MountPath
	}
	for _, v := range pod.Volumes {
		switch {
		case v.ConfigMap != nil && v.ConfigMap.Name != cm.Name:
			t.Errorf("volume %s mounts config map %s, want %s", v.Name, v.ConfigMap.Name, cm.Name)
		case v.PersistentVolumeClaim != nil && mounts[v.Name] != ResultsMount:
			t.Errorf("claim %s mounted at %q", v.PersistentVolumeClaim.ClaimName, mounts[v.Name])
		}
	}
	if mounts["spec"] != SpecMount {
		t.Errorf("spec mounted at %q", mounts["spec"])
	}

	// Inside the pod: the ConfigMap's files alone give the same sweep.
	pd := t.TempDir()
	for name, data := range cm.Data {
		if err := os.WriteFile(filepath.Join(pd, name), []byte(data), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	again, err := Load(filepath.Join(pd, "sweep.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	if again.Name != s.Name || len(again.Points) != len(s.Points) {
		t.Fatalf("in the pod: sweep %q with %d points, want %q with %d", again.Name, len(again.Points), s.Name, len(s.Points))
	}
	for i := range s.Points {
		if !bytes.Equal(again.Points[i].Scenario, s.Points[i].Scenario) || *again.Points[i].Gain != *s.Points[i].Gain {
			t.Errorf("point %d differs inside the pod", i)
		}
	}
}

// TestRunAndCollect runs a small sweep here, adds a failed point, removes one,
// and checks the CSV (one row per point, read back with encoding/csv) and the
// PNG plots (decoded with image/png).
func TestRunAndCollect(t *testing.T) {
	s, err := Parse([]byte("scenario: small\nframes_open: 50\nframes_closed: 200\ngrid:\n  gain: [0.3, 0.6]\n  atmosphere.r0_m: [0.1, 0.15]\n"), "pair", ".")
	if err != nil {
		t.Fatal(err)
	}
	dir := t.TempDir()
	var log bytes.Buffer
	results, err := RunLocal(context.Background(), s, dir, 2, &log)
	if err != nil {
		t.Fatal(err)
	}
	if strings.Count(log.String(), "\n") != 4 {
		t.Errorf("want a progress line per point:\n%s", log.String())
	}
	for _, r := range results {
		if r.Error != "" || r.Summary == nil || r.Summary.StrehlClosed <= r.Summary.StrehlOpen || !r.Summary.Lockstep {
			t.Fatalf("point %d: %+v", r.Index, r)
		}
	}
	failed := results[1]
	failed.Summary, failed.Error = nil, "demo: calibration: aborted"
	if err := failed.Write(dir); err != nil {
		t.Fatal(err)
	}
	if err := os.Remove(filepath.Join(dir, FileName(2))); err != nil {
		t.Fatal(err)
	}
	c, err := Collect(dir)
	if err != nil {
		t.Fatal(err)
	}
	files, err := c.WriteFiles(dir)
	if err != nil {
		t.Fatal(err)
	}
	if got := c.Failed(); len(got) != 2 || got[0].Index != 1 || got[1].Index != 2 || !strings.Contains(got[1].Error, "no result file") {
		t.Errorf("failed points %+v: want 1 (its error) and 2 (missing)", got)
	}
	f, err := os.Open(files[0])
	if err != nil {
		t.Fatal(err)
	}
	rows, err := csv.NewReader(f).ReadAll()
	f.Close()
	if err != nil {
		t.Fatal(err)
	}
	if len(rows) != 1+len(s.Points) {
		t.Fatalf("%d rows: want a header and one per point (%d)", len(rows), len(s.Points))
	}
	head := rows[0]
	col := func(name string) int {
		for i, h := range head {
			if h == name {
				return i
			}
		}
		t.Fatalf("no column %s in %v", name, head)
		return -1
	}
	if rows[1][col("gain")] != "0.3" || rows[2][col("atmosphere.r0_m")] != "0.15" || rows[4][col("strehl_closed")] == "" {
		t.Errorf("rows %v", rows[1:])
	}
	if rows[2][col("error")] != "demo: calibration: aborted" || rows[2][col("strehl_closed")] != "" {
		t.Errorf("failed row %v", rows[2])
	}
	if len(files) != 2 || filepath.Base(files[1]) != "strehl-vs-gain.png" {
		t.Fatalf("files %v", files)
	}
	pf, err := os.Open(files[1])
	if err != nil {
		t.Fatal(err)
	}
	defer pf.Close()
	img, err := png.Decode(pf)
	if err != nil {
		t.Fatal(err)
	}
	if b := img.Bounds(); b.Dx() < 400 || b.Dy() < 250 {
		t.Errorf("plot is %v", b)
	}
}

// TestStrehlPeaksBelowStabilityLimit sweeps the gain of the default scenario
// (two frames of delay) in short lockstep runs: the closed-loop Strehl ratio must
// peak below the pure integrator's stability limit g = 2 sin(π/(2(2d − 1))) = 1
// (Jury criterion, standard discrete-time control), and collapse above it.
func TestStrehlPeaksBelowStabilityLimit(t *testing.T) {
	if testing.Short() {
		t.Skip("skipping in -short mode: four calibrations and closed-loop runs of the default scenario")
	}
	s, err := Parse([]byte("scenario: default\nframes_open: 50\nframes_closed: 400\ngrid: {gain: [0.3, 0.6, 0.9, 1.2]}\n"), "limit", ".")
	if err != nil {
		t.Fatal(err)
	}
	d := s.Points[0].DelayFrames
	limit := StabilityLimit(d)
	results, err := RunLocal(context.Background(), s, t.TempDir(), 2, &bytes.Buffer{})
	if err != nil {
		t.Fatal(err)
	}
	best, peak := -1.0, 0.0
	for _, r := range results {
		if r.Error != "" {
			t.Fatalf("point %d: %s", r.Index, r.Error)
		}
		g := *s.Points[r.Index].Gain
		t.Logf("gain %.2f: Strehl %.3f closed (%.3f open), %d interlock trips", g, r.Summary.StrehlClosed, r.Summary.StrehlOpen, r.Summary.InterlockTrips)
		if r.Summary.StrehlClosed > peak {
			best, peak = g, r.Summary.StrehlClosed
		}
	}
	if best >= limit {
		t.Errorf("Strehl peaks at gain %.2f, not below the stability limit %.3f for %d frames of delay", best, limit, d)
	}
	if above := results[3].Summary.StrehlClosed; above > peak/2 {
		t.Errorf("gain 1.2, above the limit %.3f: Strehl %.3f, want a collapse below half the peak %.3f", limit, above, peak)
	}
}

// TestSweepIsReproducible runs the same 2-point sweep twice, the second time
// with the points in parallel: every point is a frame-exact lockstep run, so
// the CSV's Strehl columns are the same, character for character.
func TestSweepIsReproducible(t *testing.T) {
	s, err := Parse([]byte("scenario: small\nframes_open: 60\nframes_closed: 200\ngrid:\n  gain: [0.3, 0.6]\n"), "pair", ".")
	if err != nil {
		t.Fatal(err)
	}
	columns := func(jobs int) [][]string {
		t.Helper()
		dir := t.TempDir()
		if _, err := RunLocal(context.Background(), s, dir, jobs, io.Discard); err != nil {
			t.Fatal(err)
		}
		c, err := Collect(dir)
		if err != nil {
			t.Fatal(err)
		}
		files, err := c.WriteFiles(dir)
		if err != nil {
			t.Fatal(err)
		}
		f, err := os.Open(files[0])
		if err != nil {
			t.Fatal(err)
		}
		defer f.Close()
		rows, err := csv.NewReader(f).ReadAll()
		if err != nil {
			t.Fatal(err)
		}
		var out [][]string
		for i, h := range rows[0] {
			if strings.HasPrefix(h, "strehl_open") || strings.HasPrefix(h, "strehl_closed") {
				col := []string{h}
				for _, r := range rows[1:] {
					col = append(col, r[i])
				}
				out = append(out, col)
			}
		}
		if len(out) < 2 || len(rows) != 3 {
			t.Fatalf("%d rows, Strehl columns %v: want 3 rows and the open and closed Strehl ratios", len(rows), out)
		}
		return out
	}
	a, b := columns(1), columns(2)
	if !reflect.DeepEqual(a, b) {
		t.Errorf("Strehl columns differ:\n%v\n%v", a, b)
	}
}
