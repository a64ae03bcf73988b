package dashboards

import (
	"bytes"
	"os/exec"
	"strings"
	"testing"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/common/expfmt"

	"stillsky/internal/testtool"
)

// exposition renders every metric of KnownMetrics in the text exposition format,
// as the daemon and bench would with one sample each.
func exposition(t *testing.T) []byte {
	t.Helper()
	reg := prometheus.NewPedanticRegistry()
	seen := map[string]bool{}
	for _, m := range KnownMetrics {
		if seen[m.Name] {
			continue
		}
		seen[m.Name] = true
		help := "stillsky " + strings.ReplaceAll(strings.TrimPrefix(m.Name, "stillsky_"), "_", " ")
		values := make([]string, len(m.Labels))
		for i := range values {
			values[i] = "x"
		}
		switch m.Type {
		case "counter":
			c := prometheus.NewCounterVec(prometheus.CounterOpts{Name: m.Name, Help: help}, m.Labels)
			c.WithLabelValues(values...).Inc()
			reg.MustRegister(c)
		case "gauge":
			g := prometheus.NewGaugeVec(prometheus.GaugeOpts{Name: m.Name, Help: help}, m.Labels)
			g.WithLabelValues(values...).Set(1)
			reg.MustRegister(g)
		case "histogram":
			h := prometheus.NewHistogramVec(prometheus.HistogramOpts{Name: m.Name, Help: help, Buckets: LatencyBuckets}, m.Labels)
			h.WithLabelValues(values...).Observe(1e-4)
			reg.MustRegister(h)
		default:
			t.Fatalf("metric %s: type %q: want counter, gauge or histogram", m.Name, m.Type)
		}
	}
	families, err := reg.Gather()
	if err != nil {
		t.Fatal(err)
	}
	var buf bytes.Buffer
	enc := expfmt.NewEncoder(&buf, expfmt.NewFormat(expfmt.TypeTextPlain))
	for _, f := range families {
		if err := enc.Encode(f); err != nil {
			t.Fatal(err)
		}
	}
	return buf.Bytes()
}

// TestKnownMetricsFollowNamingConventions runs the contract's names through
// `promtool check metrics`, which applies the metric and label naming
// conventions of the Prometheus documentation (base units, _total on counters,
// no type or unit clashes) and prints nothing when all is well.
func TestKnownMetricsFollowNamingConventions(t *testing.T) {
	promtool := testtool.Require(t, "promtool", "prometheus")
	cmd := exec.Command(promtool, "check", "metrics")
	cmd.Stdin = bytes.NewReader(exposition(t))
	out, err := cmd.CombinedOutput()
	if err != nil || len(bytes.TrimSpace(out)) > 0 {
		t.Errorf("promtool check metrics: %v\n%s", err, out)
	}
}

// TestSeriesNamesExpandHistograms checks the exposition-format rule that a
// histogram family named x is exposed as x_bucket, x_sum and x_count (Prometheus
// text exposition format 0.0.4).
func TestSeriesNamesExpandHistograms(t *testing.T) {
	names := map[string]bool{}
	for _, n := range SeriesNames() {
		names[n] = true
	}
	for _, m := range KnownMetrics {
		if m.Type != "histogram" {
			if !names[m.Name] {
				t.Errorf("%s missing from SeriesNames", m.Name)
			}
			continue
		}
		if names[m.Name] {
			t.Errorf("histogram %s listed without a suffix", m.Name)
		}
		for _, suffix := range []string{"_bucket", "_sum", "_count"} {
			if !names[m.Name+suffix] {
				t.Errorf("%s%s missing from SeriesNames", m.Name, suffix)
			}
		}
	}
	exp := string(exposition(t))
	for n := range names {
		if !strings.Contains(exp, "\n"+n+"{") && !strings.Contains(exp, "\n"+n+" ") {
			t.Errorf("%s is in SeriesNames but not in the rendered exposition", n)
		}
	}
}
