package supervisor

import (
	"slices"

	"github.com/prometheus/client_golang/prometheus"
)

// Metrics are the supervisor's Prometheus metrics: the state as a gauge (1 for the
// current state, 0 for the others; all 0 when the daemon runs without the
// supervisor) and the transitions as a counter by from and to. Every child is
// created at registration, so each series exists from the first scrape and
// increase() sees its first transition.
type Metrics struct {
	state       [numStates]prometheus.Gauge
	transitions map[[2]State]prometheus.Counter
}

// NewMetrics registers stillsky_supervisor_state and
// stillsky_supervisor_transitions_total on reg.
func NewMetrics(reg prometheus.Registerer) *Metrics {
	state := prometheus.NewGaugeVec(prometheus.GaugeOpts{
		Name: "stillsky_supervisor_state",
		Help: "1 for the current state of the unattended-operation supervisor, 0 for the others (all 0 without --autonomous).",
	}, []string{"state"})
	trans := prometheus.NewCounterVec(prometheus.CounterOpts{
		Name: "stillsky_supervisor_transitions_total",
		Help: "Transitions of the unattended-operation supervisor, by state left and state entered.",
	}, []string{"from", "to"})
	reg.MustRegister(state, trans)
	m := &Metrics{transitions: map[[2]State]prometheus.Counter{}}
	for _, s := range States() {
		m.state[s] = state.WithLabelValues(s.String())
	}
	for _, p := range AllowedPairs() {
		m.transitions[p] = trans.WithLabelValues(p[0].String(), p[1].String())
	}
	return m
}

// Observe counts an event and moves the state gauge; it is meant for
// Supervisor.OnTransition.
func (m *Metrics) Observe(e Event) {
	if c, ok := m.transitions[[2]State{e.From, e.To}]; ok {
		c.Inc()
	}
	m.Set(e.To)
}

// Set shows s as the current state.
func (m *Metrics) Set(s State) {
	for i, g := range m.state {
		if State(i) == s {
			g.Set(1)
		} else {
			g.Set(0)
		}
	}
}

// AllowedPairs expands [Transitions] into every (from, to) pair it allows: a
// transition from any state becomes one pair per state. Manual is never left for
// Tripped: under an operator the supervisor only watches.
func AllowedPairs() [][2]State {
	var out [][2]State
	for _, tr := range Transitions {
		if tr.From != anyState {
			if p := [2]State{tr.From, tr.To}; !slices.Contains(out, p) {
				out = append(out, p)
			}
			continue
		}
		for _, s := range States() {
			if s != tr.To && !(tr.To == Tripped && s == Manual) {
				out = append(out, [2]State{s, tr.To})
			}
		}
	}
	return out
}
