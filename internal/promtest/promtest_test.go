package promtest

import (
	"context"
	"net/http"
	"net/http/httptest"
	"net/url"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/promhttp"
)

// exporter serves a registry with one counter at 3, as a program instrumented
// with client_golang would.
func exporter(t *testing.T) string {
	t.Helper()
	reg := prometheus.NewRegistry()
	c := prometheus.NewCounter(prometheus.CounterOpts{Name: "promtest_probe_events_total", Help: "Events counted by the test exporter."})
	reg.MustRegister(c)
	c.Add(3)
	srv := httptest.NewServer(promhttp.HandlerFor(reg, promhttp.HandlerOpts{}))
	t.Cleanup(srv.Close)
	u, err := url.Parse(srv.URL)
	if err != nil {
		t.Fatal(err)
	}
	return u.Host
}

// TestScrapeQueryAndAlert checks the harness end to end against a real
// Prometheus: it scrapes an exporter, the counter's value comes back through the
// query API with the job and instance labels Prometheus attaches (Prometheus
// documentation, "Jobs and instances"), a recording rule records, and an alert
// fires.
func TestScrapeQueryAndAlert(t *testing.T) {
	t.Parallel()
	host := exporter(t)
	rules := filepath.Join(t.TempDir(), "rules.yaml")
	if err := os.WriteFile(rules, []byte(`groups:
  - name: probe
    rules:
      - record: job:promtest_probe_events:sum
        expr: sum by (job) (promtest_probe_events_total)
      - alert: ProbeCounted
        expr: promtest_probe_events_total > 2
        labels:
          severity: info
        annotations:
          summary: "{{ $labels.job }} counted {{ $value }}"
`), 0o644); err != nil {
		t.Fatal(err)
	}
	s := Start(t, map[string]string{"probe": host}, []string{rules})
	if err := s.WaitForTargets(30 * time.Second); err != nil {
		t.Fatal(err)
	}

	v, err := s.WaitForQuery(`promtest_probe_events_total{job="probe"}`, 30*time.Second)
	if err != nil {
		t.Fatal(err)
	}
	if len(v) != 1 || v[0].Value != 3 || string(v[0].Metric["instance"]) != host {
		t.Errorf("query: %v: want one sample of 3 with instance %s", v, host)
	}

	v, err = s.WaitForQuery(`job:promtest_probe_events:sum`, 30*time.Second)
	if err != nil {
		t.Fatal(err)
	}
	if v[0].Value != 3 || v[0].Metric["job"] != "probe" {
		t.Errorf("recorded: %v: want 3 for job probe", v)
	}

	ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	defer cancel()
	a, err := s.WaitForAlert(ctx, "ProbeCounted")
	if err != nil {
		t.Fatal(err)
	}
	if a.Labels["severity"] != "info" || a.Annotations["summary"] != "probe counted 3" {
		t.Errorf("alert %+v: want severity info and the rendered summary", a)
	}

	rs, err := s.Rules()
	if err != nil {
		t.Fatal(err)
	}
	if len(rs) != 2 {
		t.Errorf("rules: %+v: want the two loaded", rs)
	}
	for _, r := range rs {
		if r.Health != "ok" {
			t.Errorf("rule %s: health %s (%s)", r.Name, r.Health, r.LastError)
		}
	}

	// Scalars come back as one unlabelled sample; bad PromQL is an error.
	if v, err := s.Query("1 + 1"); err != nil || len(v) != 1 || v[0].Value != 2 {
		t.Errorf("query 1 + 1: %v, %v", v, err)
	}
	if _, err := s.Query("sum("); err == nil {
		t.Error("query sum(: no error")
	}
}

// TestWaitForTargetsReportsDown points Prometheus at a port nothing listens on
// and expects WaitForTargets to give up and say which target is down.
func TestWaitForTargetsReportsDown(t *testing.T) {
	t.Parallel()
	addr, err := freePort()
	if err != nil {
		t.Fatal(err)
	}
	s := Start(t, map[string]string{"nothing": addr}, nil)
	err = s.WaitForTargets(15 * time.Second)
	if err == nil {
		t.Fatal("WaitForTargets: no error for a target nobody serves")
	}
	if !strings.Contains(err.Error(), "nothing http://"+addr+"/metrics") {
		t.Errorf("WaitForTargets: %v: want the job and URL of the down target", err)
	}
	resp, err := http.Get(s.URL + "/-/healthy")
	if err != nil {
		t.Fatal(err)
	}
	resp.Body.Close()
	if resp.StatusCode != http.StatusOK {
		t.Errorf("/-/healthy: %s", resp.Status)
	}
}
