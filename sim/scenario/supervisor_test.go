package scenario

import (
	"reflect"
	"strings"
	"testing"
	"time"
)

func TestSupervisorFields(t *testing.T) {
	doc := minimal + "supervisor: {min_flux_e: 500, loss_fraction: 0.2, return_fraction: 0.7, loss_dwell_s: 0.05, return_dwell_s: 0.3, hold_timeout_s: 3, long_pause_s: 120, measure_window_s: 1, retry_delay_s: 10}\n"
	s, err := Parse([]byte(doc))
	if err != nil {
		t.Fatalf("a valid supervisor section refused: %v", err)
	}
	want := Supervisor{MinFlux: 500, LossFraction: 0.2, ReturnFraction: 0.7, LossDwell: 50 * time.Millisecond, ReturnDwell: 300 * time.Millisecond,
		HoldTimeout: 3 * time.Second, LongPause: 120 * time.Second, MeasureWindow: time.Second, RetryDelay: 10 * time.Second}
	if s.Supervisor == nil || *s.Supervisor != want {
		t.Fatalf("parsed %+v, want %+v", s.Supervisor, want)
	}
	data, err := s.YAML()
	if err != nil {
		t.Fatal(err)
	}
	if back, err := Parse(data); err != nil || !reflect.DeepEqual(back, s) {
		t.Fatalf("round trip: %v\n%s", err, data)
	}
	if s, err := Parse([]byte(minimal + "supervisor: {}\n")); err != nil || *s.Supervisor != DefaultSupervisor() {
		t.Fatalf("an empty section takes the defaults: %+v, %v", s.Supervisor, err)
	}
	if s, err := Parse([]byte(minimal)); err != nil || s.Supervisor != nil {
		t.Fatalf("without the section: %+v, %v", s.Supervisor, err)
	}
	for _, c := range []struct{ name, old, new, want string }{
		{"min flux zero", "min_flux_e: 500", "min_flux_e: 0", "supervisor.min_flux_e: 0: must be in (0, 1e+12] photo-electrons per frame"},
		{"loss above return", "loss_fraction: 0.2", "loss_fraction: 0.8", "supervisor.loss_fraction: 0.8: must be in (0, 0.7)"},
		{"return above 1", "return_fraction: 0.7", "return_fraction: 1.5", "supervisor.return_fraction: 1.5: must be in (0, 1]"},
		{"loss dwell past the hold", "loss_dwell_s: 0.05", "loss_dwell_s: 3", "supervisor.loss_dwell_s: 3: must be in [0, 3) s"},
		{"return dwell of 2 s", "return_dwell_s: 0.3", "return_dwell_s: 2", "supervisor.return_dwell_s: 2: must be in [0, 2) s"},
		{"hold timeout zero", "hold_timeout_s: 3", "hold_timeout_s: 0", "supervisor.hold_timeout_s: 0: must be in (0, 86400] s"},
		{"long pause shorter than the hold", "long_pause_s: 120", "long_pause_s: 2", "supervisor.long_pause_s: 2: must be in (3, 604800] s"},
		{"measure window negative", "measure_window_s: 1", "measure_window_s: -1", "supervisor.measure_window_s: -1: must be in (0, 3600] s"},
		{"retry NaN", "retry_delay_s: 10", "retry_delay_s: .nan", "supervisor.retry_delay_s: NaN: must be in (0, 86400] s"},
		{"unknown key", "retry_delay_s: 10}", "retry_delay_s: 10, gain: 1}", "supervisor.gain: line"},
	} {
		t.Run(c.name, func(t *testing.T) {
			d := strings.Replace(doc, c.old, c.new, 1)
			if d == doc {
				t.Fatalf("edit %q not applied", c.old)
			}
			s, err := Parse([]byte(d))
			if err == nil || s != nil {
				t.Fatalf("accepted (or half-loaded):\n%s", d)
			}
			if !strings.Contains(err.Error(), c.want) {
				t.Errorf("error\n  %v\nwant it to contain\n  %s", err, c.want)
			}
		})
	}
}
