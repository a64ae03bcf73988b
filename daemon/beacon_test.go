package daemon

import (
	"errors"
	"strings"
	"testing"
)

// TestBeaconRefused: New refuses a declared beacon above its exposure limit
// (energy = power × time, the radiant-exposure quantity of ANSI Z136.1 and
// ISO 15004-2 summed over the session; the check is indicative only) naming the
// three values, and a beacon with a field out of range naming the field; a
// beacon within its limit is accepted, and nothing is opened for a refusal.
func TestBeaconRefused(t *testing.T) {
	cases := []struct {
		name     string
		b        Beacon
		want     string
		exposure bool
	}{
		{"above the limit", Beacon{PowerW: 1e-5, ExposureS: 2000, LimitJ: 0.01},
			"beacon-power-w 1e-05 W × beacon-exposure-s 2000 s = 0.02 J exceeds exposure-limit-j 0.01 J", true},
		{"power missing", Beacon{ExposureS: 600, LimitJ: 0.01}, "beacon-power-w 0: must be in (0, 0.01] W", false},
		{"exposure negative", Beacon{PowerW: 1e-5, ExposureS: -1, LimitJ: 0.01}, "beacon-exposure-s -1: must be in (0, 36000] s", false},
		{"limit too large", Beacon{PowerW: 1e-5, ExposureS: 600, LimitJ: 1000}, "exposure-limit-j 1000: must be in (0, 100] J", false},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			d, err := New(Config{CameraAddr: "127.0.0.1:1", MirrorAddr: "127.0.0.1:2",
				ListenAddr: "127.0.0.1:0", MetricsAddr: "-", Beacon: &c.b})
			if err == nil {
				d.ctlLis.Close()
				t.Fatalf("%+v accepted", c.b)
			}
			if !strings.Contains(err.Error(), c.want) {
				t.Errorf("error %v: want it to contain %q", err, c.want)
			}
			if errors.Is(err, ErrExposure) != c.exposure {
				t.Errorf("errors.Is(err, ErrExposure) = %v, want %v", !c.exposure, c.exposure)
			}
		})
	}
	d, err := New(Config{CameraAddr: "127.0.0.1:1", MirrorAddr: "127.0.0.1:2",
		ListenAddr: "127.0.0.1:0", MetricsAddr: "-", Beacon: &Beacon{PowerW: 1e-5, ExposureS: 600, LimitJ: 0.01}})
	if err != nil {
		t.Fatalf("beacon within its limit refused: %v", err)
	}
	d.ctlLis.Close()
}
