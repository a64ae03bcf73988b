package demo

import (
	"testing"

	"stillsky/daemon/supervisor"
	"stillsky/sim/scenario"
)

// The scenario's supervisor section and the supervisor agree: its defaults are
// the supervisor's, and what the scenario accepts at the edges of its ranges
// the supervisor accepts too (the scenario refuses with the field's YAML name
// first, so a demo never starts with a configuration the daemon would refuse).
func TestScenarioSupervisorMatchesTheSupervisor(t *testing.T) {
	if got, want := supervisorConfig(nil), supervisor.DefaultConfig(); got != want {
		t.Fatalf("without a section %+v, want %+v", got, want)
	}
	d := scenario.DefaultSupervisor()
	if got, want := supervisorConfig(&d), supervisor.DefaultConfig(); got != want {
		t.Fatalf("scenario defaults %+v, supervisor defaults %+v", got, want)
	}
	base, err := scenario.Load("small")
	if err != nil {
		t.Fatal(err)
	}
	y, err := base.YAML()
	if err != nil {
		t.Fatal(err)
	}
	for _, edge := range []string{
		"{min_flux_e: 1e-9, loss_fraction: 0.999, return_fraction: 1, loss_dwell_s: 1.999, return_dwell_s: 1.999, hold_timeout_s: 2, long_pause_s: 2.001, measure_window_s: 1e-6, retry_delay_s: 1e-6}",
		"{loss_fraction: 1e-9, return_fraction: 1e-6, loss_dwell_s: 0, return_dwell_s: 0, hold_timeout_s: 86400, long_pause_s: 604800, measure_window_s: 3600, retry_delay_s: 86400}",
	} {
		s, err := scenario.Parse([]byte(string(y) + "supervisor: " + edge + "\n"))
		if err != nil {
			t.Fatalf("%s: %v", edge, err)
		}
		if err := supervisorConfig(s.Supervisor).Validate(); err != nil {
			t.Errorf("%s: accepted by the scenario, refused by the supervisor: %v", edge, err)
		}
	}
}
