package dashboards

import (
	"testing"
	"time"

	"stillsky/internal/promtest"
)

// TestPrometheusAcceptsQueriesAndRules loads the rule file into the Prometheus
// the deployment runs (the Debian package) and sends it every panel query: the
// PromQL parser in the other tests is a newer Prometheus's, and this checks the
// dialect of the server operations staff will have. With nothing scraped the
// queries return no data; what is checked is that each is accepted and each rule
// evaluates without error.
func TestPrometheusAcceptsQueriesAndRules(t *testing.T) {
	s := promtest.Start(t, nil, []string{"rules/stillsky-rules.yaml"})
	files, err := Build()
	if err != nil {
		t.Fatal(err)
	}
	for _, q := range Queries(files) {
		if _, err := s.Query(Interpolate(q.Expr, "1m")); err != nil {
			t.Errorf("%s/%s: %v", q.Dashboard, q.Panel, err)
		}
	}
	rules, err := Rules()
	if err != nil {
		t.Fatal(err)
	}
	deadline := time.Now().Add(30 * time.Second)
	for {
		loaded, err := s.Rules()
		if err != nil {
			t.Fatal(err)
		}
		pending := 0
		for _, r := range loaded {
			switch r.Health {
			case "ok":
			case "err":
				t.Fatalf("rule %s: %s", r.Name, r.LastError)
			default:
				pending++
			}
		}
		if len(loaded) != len(rules) {
			t.Fatalf("Prometheus loaded %d rules, the file holds %d", len(loaded), len(rules))
		}
		if pending == 0 {
			return
		}
		if time.Now().After(deadline) {
			t.Fatalf("%d rules not evaluated after 30 s", pending)
		}
		time.Sleep(promtest.Interval / 2)
	}
}
