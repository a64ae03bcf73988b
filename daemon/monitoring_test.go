package daemon_test

import (
	"bytes"
	"context"
	"io"
	"net/http"
	"os/exec"
	"testing"

	"stillsky/daemon"
	"stillsky/internal/testtool"
	stillskyv1 "stillsky/proto/stillsky/v1"
	"stillsky/sim/bench"
)

// TestMetricsPassPromtool runs the loop closed on the small scenario, so that
// every metric has been observed, and checks the daemon's and the bench's
// /metrics with `promtool check metrics`, the Prometheus project's linter of the
// exposition format and of its naming conventions (Prometheus documentation,
// "Metric and label naming"): base units, _total on counters, unit suffixes,
// help text. It must report nothing.
func TestMetricsPassPromtool(t *testing.T) {
	promtool := testtool.Require(t, "promtool", "prometheus")
	r := startRig(t, "small", bench.Options{Lockstep: true}, daemon.Config{})
	r.calibrate(t)
	if _, err := r.client.CloseLoop(context.Background(), &stillskyv1.CloseLoopRequest{}); err != nil {
		t.Fatal(err)
	}
	r.waitFrames(t, 200)
	for _, c := range []struct{ name, addr string }{
		{"loop daemon", r.d.MetricsAddr()},
		{"bench", r.bl.Metrics.Addr().String()},
	} {
		body := fetch(t, "http://"+c.addr+"/metrics")
		cmd := exec.Command(promtool, "check", "metrics")
		cmd.Stdin = bytes.NewReader(body)
		out, err := cmd.CombinedOutput()
		if err != nil || len(bytes.TrimSpace(out)) > 0 {
			t.Errorf("%s: promtool check metrics: %v\n%s", c.name, err, out)
		}
	}
}

// fetch returns the body of a 200 answer to GET url.
func fetch(t *testing.T, url string) []byte {
	t.Helper()
	resp, err := http.Get(url)
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	body, err := io.ReadAll(resp.Body)
	if err != nil {
		t.Fatal(err)
	}
	if resp.StatusCode != http.StatusOK {
		t.Fatalf("GET %s: %s: %s", url, resp.Status, body)
	}
	return body
}
