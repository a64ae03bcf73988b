package supervisor

import (
	"testing"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	dto "github.com/prometheus/client_model/go"
)

// value reads a gauge's or counter's value as a scrape would.
func value(t *testing.T, m prometheus.Metric) float64 {
	t.Helper()
	var d dto.Metric
	if err := m.Write(&d); err != nil {
		t.Fatal(err)
	}
	if d.Counter != nil {
		return d.Counter.GetValue()
	}
	return d.Gauge.GetValue()
}

// series gathers reg and returns the label sets and values of the family name.
func series(t *testing.T, reg *prometheus.Registry, name string) map[string]float64 {
	t.Helper()
	fams, err := reg.Gather()
	if err != nil {
		t.Fatal(err)
	}
	out := map[string]float64{}
	for _, f := range fams {
		if f.GetName() != name {
			continue
		}
		for _, m := range f.Metric {
			key := ""
			for _, l := range m.Label {
				key += l.GetName() + "=" + l.GetValue() + ","
			}
			out[key] = m.GetGauge().GetValue() + m.GetCounter().GetValue()
		}
	}
	return out
}

// TestMetricsCountEachTransitionOnce runs a short cloud (held through) and checks the counter
// against the events: one increment per transition, not per frame, and the state
// gauge on the final state only.
func TestMetricsCountEachTransitionOnce(t *testing.T) {
	reg := prometheus.NewRegistry()
	m := NewMetrics(reg)
	r := newRig(t)
	r.s.OnTransition = func(e Event) { r.events = append(r.events, e); m.Observe(e) }
	toHolding(r)
	r.in.Flux = 1000
	r.run(time.Second) // back to Closed
	want := map[[2]State]float64{}
	for _, e := range r.events {
		want[[2]State{e.From, e.To}]++
	}
	if want[[2]State{Closed, Holding}] != 1 || want[[2]State{Holding, Closed}] != 1 {
		t.Fatalf("events %+v: want one closed→holding and one holding→closed", r.events)
	}
	for _, p := range AllowedPairs() {
		got := value(t, m.transitions[p])
		if got != want[p] {
			t.Errorf("%v→%v counted %g, want %g", p[0], p[1], got, want[p])
		}
	}
	for _, s := range States() {
		w := 0.0
		if s == Closed {
			w = 1
		}
		if got := value(t, m.state[s]); got != w {
			t.Errorf("state gauge %v = %g, want %g", s, got, w)
		}
	}
	if n := len(series(t, reg, "stillsky_supervisor_transitions_total")); n != len(AllowedPairs()) {
		t.Fatalf("%d transition series, want %d, all present from the start", n, len(AllowedPairs()))
	}
	st := series(t, reg, "stillsky_supervisor_state")
	if len(st) != len(States()) || st["state=closed,"] != 1 {
		t.Fatalf("state series %v, want %d with closed = 1", st, len(States()))
	}
}
