package scenario

import (
	"errors"
	"os"
	"strings"
	"testing"
)

func eyeDoc(t *testing.T) string {
	t.Helper()
	b, err := os.ReadFile("builtin/eye.yaml")
	if err != nil {
		t.Fatal(err)
	}
	return string(b)
}

// TestEyeScenario: the built-in eye has the section the issue asks for and no
// atmosphere; its beacon is within its limit.
func TestEyeScenario(t *testing.T) {
	s, err := Load("eye")
	if err != nil {
		t.Fatal(err)
	}
	e := s.Eye
	if e == nil || s.Atmosphere.Layers != nil {
		t.Fatalf("eye %+v, atmosphere %+v: want an eye and no layers", e, s.Atmosphere)
	}
	if e.Study != StudyThibos2002 || e.AccommodationLow != 1 || e.AccommodationHigh != 2 || e.Energy() > e.ExposureLimit {
		t.Errorf("eye %+v", e)
	}
	if w := s.Science.Wavelength; w < 7.5e-7 || w > 1.4e-6 {
		t.Errorf("science at %g m: want near infrared", w)
	}
}

// TestEyeRefused: bad eye fields are refused naming the field and the range,
// nothing half-loaded; a beacon above the configured limit is refused with
// ErrExposure and its values named.
func TestEyeRefused(t *testing.T) {
	cases := []struct {
		name, old, new, want string
		exposure             bool
	}{
		{"missing power", "  beacon_power_w: 1.0e-5\n", "", "eye.beacon_power_w: missing: required, must be in (0, 0.01] W", false},
		{"missing limit", "  exposure_limit_j: 0.01\n", "", "eye.exposure_limit_j: missing: required", false},
		{"missing study", "  study: thibos2002\n", "", "eye.study: missing: required", false},
		{"unknown study", "study: thibos2002", "study: other", `eye.study: "other": must be "thibos2002"`, false},
		{"unknown key", "  seed: 3\n", "  seed: 3\n  wind_speed_m_per_s: 3\n", "eye.wind_speed_m_per_s: line", false},
		{"power out of range", "beacon_power_w: 1.0e-5", "beacon_power_w: 1", "eye.beacon_power_w: 1: must be in (0, 0.01] W", false},
		{"negative exposure", "beacon_exposure_s: 600", "beacon_exposure_s: -1", "eye.beacon_exposure_s: -1: must be in (0, 36000] s", false},
		{"accommodation too large", "accommodation_rms_d: 0.1", "accommodation_rms_d: 3", "eye.accommodation_rms_d: 3: must be in [0, 1] dioptres", false},
		{"band reversed", "[1, 2]", "[2, 1]", "eye.accommodation_band_hz: [2 1]: must be [low, high]", false},
		{"band too high", "[1, 2]", "[1, 12]", "eye.accommodation_band_hz: [1 12]: must be [low, high] with 0 < low < high <= 10 Hz", false},
		{"band above frame rate", "frame_rate_hz: 30", "frame_rate_hz: 3", "eye.accommodation_band_hz: high 2 Hz: must be below the Nyquist frequency", false},
		{"pupil not the study's", "diameter_m: 0.006", "diameter_m: 0.007", "telescope.diameter_m: 0.007: an eye scenario's pupil must be 0.006 m", false},
		{"eye and atmosphere", "eye:\n", "atmosphere: {r0_m: 0.1, l0_m: 20, layers: [{altitude_m: 0, fraction: 1, wind_speed_m_per_s: 5, wind_direction_deg: 0}]}\neye:\n", "eye: a scenario has either an atmosphere or an eye section", false},
		{"exposure above limit", "beacon_exposure_s: 600", "beacon_exposure_s: 2000", "beacon_power_w 1e-05 W × beacon_exposure_s 2000 s = 0.02 J exceeds exposure_limit_j 0.01 J", true},
	}
	doc := eyeDoc(t)
	if _, err := Parse([]byte(doc)); err != nil {
		t.Fatalf("the unbroken file must parse: %v", err)
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			d := strings.Replace(doc, c.old, c.new, 1)
			if d == doc {
				t.Fatalf("edit %q not applied", c.old)
			}
			s, err := Parse([]byte(d))
			if err == nil {
				t.Fatalf("accepted:\n%s", d)
			}
			if s != nil {
				t.Errorf("half-loaded scenario returned with the error")
			}
			if !strings.Contains(err.Error(), c.want) {
				t.Errorf("error\n  %v\nwant it to contain\n  %s", err, c.want)
			}
			if errors.Is(err, ErrExposure) != c.exposure {
				t.Errorf("errors.Is(err, ErrExposure) = %v, want %v", !c.exposure, c.exposure)
			}
		})
	}
}
