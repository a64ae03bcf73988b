package daemon_test

import (
	"bytes"
	"context"
	"fmt"
	"io"
	"math"
	"net/http"
	"os/exec"
	"testing"
	"time"

	"github.com/prometheus/prometheus/promql/parser"

	"stillsky/daemon"
	"stillsky/dashboards"
	"stillsky/internal/promtest"
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
		{"bench", r.rig.BenchHTTPAddr},
	} {
		t.Run(c.name, func(t *testing.T) {
			body := fetch(t, "http://"+c.addr+"/metrics")
			cmd := exec.Command(promtool, "check", "metrics")
			cmd.Stdin = bytes.NewReader(body)
			out, err := cmd.CombinedOutput()
			if err != nil || len(bytes.TrimSpace(out)) > 0 {
				t.Errorf("%s: promtool check metrics: %v\n%s", c.name, err, out)
			}
		})
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

// TestPrometheusSeesTheRig scrapes a bench and a loop with the Prometheus of the
// deployment (Debian package prometheus), with the job names of deploy/ and the
// rule file of dashboards/. Every dashboard panel query and
// every rule expression must return data. An alert expression that is false on
// a healthy loop returns nothing by design; for those, every series the
// expression selects must return data, so that the alert would see a fault.
// Opening the closed loop must then fire the loop-opened alert.
func TestPrometheusSeesTheRig(t *testing.T) {
	if testing.Short() {
		t.Skip("Prometheus integration takes ~40 s")
	}
	// Lockstep: a free-running loop starved of CPU on a loaded machine sees
	// frames late and may trip before the closed state has been scraped.
	r := startRig(t, "small", bench.Options{Lockstep: true}, daemon.Config{})
	prom := promtest.Start(t, map[string]string{
		"stillsky-sim":  r.rig.BenchHTTPAddr,
		"stillsky-loop": r.d.MetricsAddr(),
	}, []string{"../dashboards/rules/stillsky-rules.yaml"})
	r.calibrate(t)
	if _, err := r.client.CloseLoop(context.Background(), &stillskyv1.CloseLoopRequest{}); err != nil {
		t.Fatal(err)
	}
	if err := prom.WaitForTargets(30 * time.Second); err != nil {
		t.Fatal(err)
	}
	// The closed state must have been scraped before the loop opens.
	if _, err := prom.WaitForQuery(`stillsky_loop_state{job="stillsky-loop",state="closed"} == 1`, 30*time.Second); err != nil {
		t.Fatal(err)
	}

	files, err := dashboards.Build()
	if err != nil {
		t.Fatal(err)
	}
	for _, q := range dashboards.Queries(files) {
		// A rate needs two scrapes in its window: 10 s holds several at 1 s.
		expr := dashboards.Interpolate(q.Expr, "10s")
		if err := waitData(prom, expr); err != nil {
			t.Errorf("%s / %s: %v", q.Dashboard, q.Panel, err)
		}
	}
	rules, err := dashboards.Rules()
	if err != nil {
		t.Fatal(err)
	}
	for _, rule := range rules {
		if rule.Record != "" {
			if err := waitData(prom, rule.Expr); err != nil {
				t.Errorf("record %s: %v", rule.Record, err)
			}
			continue
		}
		v, err := prom.Query(rule.Expr)
		if err != nil {
			t.Errorf("alert %s: %v", rule.Alert, err)
			continue
		}
		if len(v) > 0 {
			t.Logf("alert %s holds on the test rig: %v", rule.Alert, v)
			continue
		}
		sels, err := selectors(rule.Expr)
		if err != nil {
			t.Errorf("alert %s: %v", rule.Alert, err)
		}
		for _, sel := range sels {
			if err := waitData(prom, sel); err != nil {
				t.Errorf("alert %s: selector %s: %v", rule.Alert, sel, err)
			}
		}
	}
	loaded, err := prom.Rules()
	if err != nil {
		t.Fatal(err)
	}
	for _, rule := range loaded {
		if rule.Health == "err" {
			t.Errorf("rule %s: %s", rule.Name, rule.LastError)
		}
	}

	if _, err := r.client.OpenLoop(context.Background(), &stillskyv1.OpenLoopRequest{}); err != nil {
		t.Fatal(err)
	}
	// The alert waits 15 s (its for clause) after the first evaluation that sees
	// the loop open.
	ctx, cancel := context.WithTimeout(context.Background(), 60*time.Second)
	defer cancel()
	a, err := prom.WaitForAlert(ctx, "StillskyLoopOpenedUnexpectedly")
	if err != nil {
		t.Fatal(err)
	}
	if a.Labels["job"] != "stillsky-loop" || a.Labels["severity"] != "critical" {
		t.Errorf("alert labels %v: want job stillsky-loop, severity critical", a.Labels)
	}
}

// waitData waits until expr returns at least one finite sample.
func waitData(prom *promtest.Server, expr string) error {
	deadline := time.Now().Add(30 * time.Second)
	for {
		v, err := prom.Query(expr)
		if err != nil {
			return err
		}
		for _, s := range v {
			if f := float64(s.Value); !math.IsNaN(f) && !math.IsInf(f, 0) {
				return nil
			}
		}
		if time.Now().After(deadline) {
			return fmt.Errorf("no finite sample after 30 s (got %v)", v)
		}
		time.Sleep(promtest.Interval / 2)
	}
}

// selectors returns the series selectors of a PromQL expression, parsed by
// Prometheus's own parser.
func selectors(expr string) ([]string, error) {
	e, err := parser.NewParser(parser.Options{}).ParseExpr(expr)
	if err != nil {
		return nil, err
	}
	var out []string
	parser.Inspect(e, func(n parser.Node, _ []parser.Node) error {
		if vs, ok := n.(*parser.VectorSelector); ok {
			out = append(out, vs.String())
		}
		return nil
	})
	return out, nil
}
