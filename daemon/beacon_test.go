package daemon

import (
	"errors"
	"math"
	"strings"
	"testing"

	stillskyv1 "stillsky/proto/stillsky/v1"
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

// TestDeviceBeaconChecked: a camera's declared beacon (Describe
// retinal_beacon) is checked by the device's own figures, against the lower
// of its limit and the daemon's, and refused naming the fields and the limit.
func TestDeviceBeaconChecked(t *testing.T) {
	dev := func(p, e, l float64) *stillskyv1.RetinalBeacon {
		return &stillskyv1.RetinalBeacon{PowerW: p, ExposureS: e, ExposureLimitJ: l}
	}
	cases := []struct {
		name     string
		rb       *stillskyv1.RetinalBeacon
		own      *Beacon
		want     string // "" for accepted
		exposure bool
	}{
		{"sky camera", nil, nil, "", false},
		{"within the camera's limit", dev(1e-5, 600, 0.01), nil, "", false},
		{"within both limits", dev(1e-5, 600, 0.01), &Beacon{PowerW: 1e-6, ExposureS: 600, LimitJ: 0.008}, "", false},
		{"above the camera's limit", dev(1e-5, 2000, 0.01), nil,
			"camera retinal_beacon.power_w 1e-05 W × retinal_beacon.exposure_s 2000 s = 0.02 J exceeds retinal_beacon.exposure_limit_j (the camera's) 0.01 J", true},
		{"above the daemon's limit", dev(1e-5, 600, 0.01), &Beacon{PowerW: 1e-6, ExposureS: 600, LimitJ: 0.005},
			"camera retinal_beacon.power_w 1e-05 W × retinal_beacon.exposure_s 600 s = 0.006 J exceeds exposure-limit-j (the daemon's) 0.005 J", true},
		{"power missing", dev(0, 600, 0.01), nil, "camera retinal_beacon.power_w 0: must be in (0, 0.01] W", false},
		{"exposure NaN", dev(1e-5, math.NaN(), 0.01), nil, "retinal_beacon.exposure_s NaN: must be in (0, 36000] s", false},
		{"limit too large", dev(1e-5, 600, 1e3), nil, "retinal_beacon.exposure_limit_j 1000: must be in (0, 100] J", false},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			err := checkDeviceBeacon(c.rb, c.own)
			switch {
			case c.want == "" && err != nil:
				t.Fatalf("refused: %v", err)
			case c.want != "" && (err == nil || !strings.Contains(err.Error(), c.want)):
				t.Fatalf("error %v: want it to contain %q", err, c.want)
			}
			if errors.Is(err, ErrExposure) != c.exposure {
				t.Errorf("errors.Is(err, ErrExposure) = %v, want %v", !c.exposure, c.exposure)
			}
		})
	}
}
