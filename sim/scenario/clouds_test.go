package scenario

import (
	"math"
	"reflect"
	"strings"
	"testing"
)

const cloudy = minimal + `clouds:
  - {start_s: 10, duration_s: 4, depth: 0.9, ramp_s: 1}
  - {start_s: 20, duration_s: 2, depth: 0.5}
`

func TestCloudFields(t *testing.T) {
	s, err := Parse([]byte(cloudy))
	if err != nil {
		t.Fatalf("a valid clouds list refused: %v", err)
	}
	want := Clouds{{Start: 10, Duration: 4, Depth: 0.9, Ramp: 1}, {Start: 20, Duration: 2, Depth: 0.5}}
	if !reflect.DeepEqual(s.Clouds, want) {
		t.Fatalf("parsed %+v, want %+v", s.Clouds, want)
	}
	data, err := s.YAML()
	if err != nil {
		t.Fatal(err)
	}
	if back, err := Parse(data); err != nil || !reflect.DeepEqual(back, s) {
		t.Fatalf("round trip: %v\n%s", err, data)
	}
	if s, err := Parse([]byte(minimal)); err != nil || s.Clouds != nil {
		t.Fatalf("without the list the night is clear: %+v, %v", s.Clouds, err)
	}
	for _, c := range []struct{ name, old, new, want string }{
		{"start missing", "start_s: 10, ", "", "clouds[0].start_s: missing: required, must be in [0, 1e+06] s of frame time"},
		{"start negative", "start_s: 10", "start_s: -1", "clouds[0].start_s: -1: must be in [0, 1e+06]"},
		{"duration missing", "duration_s: 2, ", "", "clouds[1].duration_s: missing: required, must be in (0, 86400] s"},
		{"duration zero", "duration_s: 2", "duration_s: 0", "clouds[1].duration_s: 0: must be in (0, 86400] s"},
		{"depth missing", ", depth: 0.5", "", "clouds[1].depth: missing: required, must be in (0, 0.999]"},
		{"depth opaque", "depth: 0.9", "depth: 1", "clouds[0].depth: 1: must be in (0, 0.999]"},
		{"depth NaN", "depth: 0.9", "depth: .nan", "clouds[0].depth: NaN: must be in (0, 0.999]"},
		{"ramp too long", "ramp_s: 1", "ramp_s: 2.5", "clouds[0].ramp_s: 2.5: must be in [0, 2] s (duration_s/2)"},
		{"overlap", "start_s: 20", "start_s: 13", "clouds[1].start_s: 13: must be >= 14 s, the end of clouds[0]"},
		{"unknown key", "depth: 0.5}", "depth: 0.5, opacity: 1}", "clouds[1].opacity: line"},
		{"not a list", "clouds:\n  - {start_s: 10, duration_s: 4, depth: 0.9, ramp_s: 1}\n  - {start_s: 20, duration_s: 2, depth: 0.5}\n", "clouds: {start_s: 1}\n", "clouds: line 14: must be a list"},
		{"null entry", "  - {start_s: 20, duration_s: 2, depth: 0.5}\n", "  - ~\n", "clouds[1]: line 16: null value"},
	} {
		t.Run(c.name, func(t *testing.T) {
			doc := strings.Replace(cloudy, c.old, c.new, 1)
			if doc == cloudy {
				t.Fatalf("edit %q not applied", c.old)
			}
			s, err := Parse([]byte(doc))
			if err == nil || s != nil {
				t.Fatalf("accepted (or half-loaded):\n%s", doc)
			}
			if !strings.Contains(err.Error(), c.want) {
				t.Errorf("error\n  %v\nwant it to contain\n  %s", err, c.want)
			}
		})
	}
	eye := strings.Replace(eyeDoc(t), "science:", "clouds: [{start_s: 1, duration_s: 1, depth: 0.5}]\nscience:", 1)
	if _, err := Parse([]byte(eye)); err == nil || !strings.Contains(err.Error(), "clouds: an eye scenario has no sky") {
		t.Errorf("clouds on an eye scenario: %v", err)
	}
}

// TestCloudTransmission checks the shape of a passage at hand-computed times: the
// linear ramps, the plateau at 1 − depth, a passage without ramps, and the clear
// sky between.
func TestCloudTransmission(t *testing.T) {
	cs := Clouds{{Start: 10, Duration: 4, Depth: 0.9, Ramp: 1}, {Start: 20, Duration: 2, Depth: 0.5}}
	for _, c := range []struct{ t, want float64 }{
		{0, 1}, {9.99, 1}, {10, 1}, {10.5, 0.55}, {11, 0.1}, {12, 0.1}, {13, 0.1}, {13.5, 0.55}, {14, 1}, {14.01, 1},
		{19.99, 1}, {20, 0.5}, {21, 0.5}, {22, 0.5}, {22.01, 1}, {1e6, 1},
	} {
		if got := cs.Transmission(c.t); math.Abs(got-c.want) > 1e-12 {
			t.Errorf("Transmission(%g) = %g, want %g", c.t, got, c.want)
		}
	}
}

// TestCloudRecovered checks Recovered against a search along Transmission.
func TestCloudRecovered(t *testing.T) {
	for _, c := range []Cloud{{Start: 10, Duration: 4, Depth: 0.9, Ramp: 1}, {Start: 20, Duration: 2, Depth: 0.5}, {Start: 1, Duration: 3, Depth: 0.99, Ramp: 0.4}} {
		for _, frac := range []float64{0.3, 0.6, 0.95} {
			want := c.Start
			if 1-c.Depth < frac {
				want = c.Start + c.Duration
				cs := Clouds{c}
				for x := c.Start + c.Duration/2; x <= c.Start+c.Duration; x += 1e-5 {
					if cs.Transmission(x) >= frac {
						want = x
						break
					}
				}
			}
			if got := c.Recovered(frac); math.Abs(got-want) > 2e-5 {
				t.Errorf("%+v: Recovered(%g) = %g, want %g", c, frac, got, want)
			}
		}
	}
}
