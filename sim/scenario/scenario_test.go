package scenario

import (
	"math"
	"os"
	"path/filepath"
	"reflect"
	"strings"
	"testing"
)

func TestBuiltinsLoad(t *testing.T) {
	names := Builtin()
	for _, want := range []string{"default", "small", "large", "xao", "lgs", "pixels"} {
		if !strings.Contains(strings.Join(names, " "), want) {
			t.Errorf("Builtin() = %v: missing %q", names, want)
		}
	}
	// Geometry the issue asks for: subapertures, Fried DM (N+1), frame rate.
	geometry := map[string]struct {
		diameter  float64
		subaps    int
		frameRate float64
	}{
		"small":   {1.5, 8, 500},
		"default": {3.6, 24, 1000},
		"large":   {8, 40, 1000},
		"xao":     {8, 64, 2000},
		"eye":     {0.006, 9, 30},
	}
	for _, name := range names {
		t.Run(name, func(t *testing.T) {
			s, err := Load(name)
			if err != nil {
				t.Fatal(err)
			}
			if s.Name != name {
				t.Errorf("name %q, want %q", s.Name, name)
			}
			g, ok := geometry[name]
			if !ok {
				return
			}
			if s.Telescope.Diameter != g.diameter || s.WFS.Subapertures != g.subaps ||
				s.DM.Actuators != g.subaps+1 || s.Loop.FrameRate != g.frameRate {
				t.Errorf("geometry D=%g N=%d act=%d rate=%g, want D=%g N=%d act=%d rate=%g",
					s.Telescope.Diameter, s.WFS.Subapertures, s.DM.Actuators, s.Loop.FrameRate,
					g.diameter, g.subaps, g.subaps+1, g.frameRate)
			}
		})
	}
}

func TestDefaultScenarioValues(t *testing.T) {
	s, err := Load(Default)
	if err != nil {
		t.Fatal(err)
	}
	if s.Atmosphere.R0 != 0.12 || len(s.Atmosphere.Layers) != 3 || s.Science.Wavelength != 1.65e-6 {
		t.Errorf("default: r0 %g, %d layers, science %g m; want 0.12 m, 3 layers, 1.65e-6 m",
			s.Atmosphere.R0, len(s.Atmosphere.Layers), s.Science.Wavelength)
	}
	// N_ph = ZP·10^(−0.4 m)·throughput·d²/rate with ZP = 1e10 photons/s/m²
	// (Bessell, Castelli & Plez 1998, from memory): m = 8, 0.3, d = 0.15 m, 1 kHz.
	want := 1e10 * math.Pow(10, -3.2) * 0.3 * 0.15 * 0.15 / 1000
	if got := s.PhotonsPerSubaperture(); math.Abs(got-want) > 1e-9*want {
		t.Errorf("photons per subaperture %g, want %g", got, want)
	}
	// Default pixel scale: Nyquist λ/(2d) at the guide-star wavelength.
	if got, want := s.WFS.PixelScale, 7e-7/(2*0.15); math.Abs(got-want) > 1e-15 {
		t.Errorf("pixel scale %g, want %g", got, want)
	}
}

func TestRoundTrip(t *testing.T) {
	for _, name := range Builtin() {
		s, err := Load(name)
		if err != nil {
			t.Fatal(err)
		}
		data, err := s.YAML()
		if err != nil {
			t.Fatal(err)
		}
		back, err := Parse(data)
		if err != nil {
			t.Fatalf("%s: reparse: %v\n%s", name, err, data)
		}
		if !reflect.DeepEqual(s, back) {
			t.Errorf("%s: round trip differs:\n%+v\n%+v", name, s, back)
		}
	}
}

func TestLoadFile(t *testing.T) {
	s, err := Load(Default)
	if err != nil {
		t.Fatal(err)
	}
	s.Name = "copy"
	data, err := s.YAML()
	if err != nil {
		t.Fatal(err)
	}
	p := filepath.Join(t.TempDir(), "copy.yaml")
	if err := os.WriteFile(p, data, 0o644); err != nil {
		t.Fatal(err)
	}
	got, err := Load(p)
	if err != nil {
		t.Fatal(err)
	}
	if !reflect.DeepEqual(s, got) {
		t.Errorf("loaded %+v, want %+v", got, s)
	}
	if _, err := Load(filepath.Join(t.TempDir(), "absent.yaml")); err == nil ||
		!strings.Contains(err.Error(), "default") {
		t.Errorf("absent file: err %v, want a refusal listing the built-ins", err)
	}
}

// minimal is a complete scenario with only the required keys.
const minimal = `name: t
telescope: {diameter_m: 2, obstruction: 0.2, pupil_samples: 40}
atmosphere:
  r0_m: 0.1
  l0_m: 20
  layers:
    - {altitude_m: 0, fraction: 0.8, wind_speed_m_per_s: 5, wind_direction_deg: 0}
    - {altitude_m: 5000, fraction: 0.2, wind_speed_m_per_s: 10, wind_direction_deg: 90}
guide_star: {magnitude: 8, wavelength_m: 7e-7, zero_point_photons_per_s_per_m2: 1e10, throughput: 0.3}
wfs: {subapertures: 10, mode: geometric}
dm: {actuators: 11, coupling: 0.15, stroke_m: 3e-6}
loop: {frame_rate_hz: 1000, delay_frames: 1}
science: {wavelength_m: 1.65e-6}
`

func TestDefaults(t *testing.T) {
	s, err := Parse([]byte(minimal))
	if err != nil {
		t.Fatal(err)
	}
	w := s.WFS
	if w.ValidThreshold != 0.5 || !w.Noise || w.PixelsPerSubaperture != 8 || w.ReadNoise != 0 ||
		s.DM.Margin != 0.75 || s.Atmosphere.Seed != 1 || s.Telescope.Spiders != 0 {
		t.Errorf("defaults not applied: %+v %+v %+v", w, s.DM, s.Atmosphere)
	}
}

func TestRefused(t *testing.T) {
	cases := []struct {
		name, old, new, want string
	}{
		{"negative fraction", "fraction: 0.2,", "fraction: -0.2,", "atmosphere.layers[1].fraction: -0.2: must be in (0, 1]"},
		{"fractions do not sum to 1", "fraction: 0.2,", "fraction: 0.3,", "atmosphere.layers: fractions sum to 1.1"},
		{"unknown key", "delay_frames: 1}", "delay_frames: 1, gain: 0.4}", "loop.gain: line 12: unknown key"},
		{"unknown top-level key", "name: t\n", "name: t\nmirror: {}\n", "mirror: line 2: unknown key"},
		{"missing required", "  r0_m: 0.1\n", "", "atmosphere.r0_m: missing: required, must be in (0, 5]"},
		{"missing section", "science: {wavelength_m: 1.65e-6}\n", "", "science: missing: required section"},
		{"negative diameter", "diameter_m: 2,", "diameter_m: -2,", "telescope.diameter_m: -2: must be in (0, 100] m"},
		{"zero frame rate", "frame_rate_hz: 1000", "frame_rate_hz: 0", "loop.frame_rate_hz: 0: must be in (0, 100000] Hz"},
		{"wrong type", "magnitude: 8,", "magnitude: bright,", `guide_star.magnitude: line 9: "bright" is not a valid float64`},
		{"bad mode", "mode: geometric", "mode: optical", `wfs.mode: "optical": must be "geometric" or "diffractive"`},
		{"not Fried", "actuators: 11", "actuators: 10", "dm.actuators: 10: must be wfs.subapertures+1 = 11"},
		{"samples not a multiple", "pupil_samples: 40", "pupil_samples: 45", "telescope.pupil_samples: 45: must be a multiple of wfs.subapertures (10)"},
		{"one sample per subaperture", "pupil_samples: 40", "pupil_samples: 10", "telescope.pupil_samples: 10: must be a multiple"},
		{"negative delay", "delay_frames: 1", "delay_frames: -1", "loop.delay_frames: -1: must be an integer in [0, 10]"},
		{"integer expected", "subapertures: 10,", "subapertures: 10.5,", `wfs.subapertures: line 10: "10.5" is not a valid int`},
		{"NaN", "throughput: 0.3", "throughput: .nan", "guide_star.throughput: NaN: must be in (0, 1]"},
		{"duplicate key", "r0_m: 0.1\n", "r0_m: 0.1\n  r0_m: 0.2\n", "atmosphere.r0_m: line 5: duplicate key"},
		{"null", "l0_m: 20", "l0_m: ~", "atmosphere.l0_m: line 5: null value"},
		{"layers not a list", "  layers:\n", "  layers: {}\n  old_layers:\n", "atmosphere.layers: line 6: must be a list"},
		{"coupling too large", "coupling: 0.15", "coupling: 0.9", "dm.coupling: 0.9: must be in [0.01, 0.6]"},
		{"wide spider", "pupil_samples: 40}", "pupil_samples: 40, spiders: 4, spider_width_m: 0.5}", "telescope.spider_width_m: 0.5: must be in [0, 0.2] m"},
		{"diffractive field too wide", "mode: geometric}", "mode: diffractive, pixels_per_subaperture: 16}", "wfs.pixels_per_subaperture: 16 pixels"},
		{"two documents", "science: {wavelength_m: 1.65e-6}\n", "science: {wavelength_m: 1.65e-6}\n---\nname: u\n", "more than one YAML document"},
	}
	if _, err := Parse([]byte(minimal)); err != nil {
		t.Fatalf("the unbroken file must parse: %v", err)
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			doc := strings.Replace(minimal, c.old, c.new, 1)
			if doc == minimal {
				t.Fatalf("edit %q not applied", c.old)
			}
			s, err := Parse([]byte(doc))
			if err == nil {
				t.Fatalf("accepted:\n%s", doc)
			}
			if s != nil {
				t.Errorf("half-loaded scenario returned with the error")
			}
			if !strings.Contains(err.Error(), c.want) {
				t.Errorf("error\n  %v\nwant it to contain\n  %s", err, c.want)
			}
		})
	}
	if _, err := Parse(nil); err == nil {
		t.Error("empty document accepted")
	}
}

func TestErrorsListEveryProblem(t *testing.T) {
	doc := strings.Replace(strings.Replace(minimal, "r0_m: 0.1", "r0_m: -1", 1), "throughput: 0.3", "throughput: 2", 1)
	_, err := Parse([]byte(doc))
	if err == nil || !strings.Contains(err.Error(), "atmosphere.r0_m") || !strings.Contains(err.Error(), "guide_star.throughput") {
		t.Errorf("err %v: want both atmosphere.r0_m and guide_star.throughput named", err)
	}
}

// The laser_guide_star section and the science offsets: missing, unknown and
// out-of-range values are refused by name, like every other field.
func TestLaserGuideStarFields(t *testing.T) {
	lgs := strings.Replace(minimal, "science: {wavelength_m: 1.65e-6}\n",
		"science: {wavelength_m: 1.65e-6, offset_x_arcsec: 5}\nlaser_guide_star: {height_m: 90000, thickness_m: 10000, launch_x_m: 1}\n", 1)
	s, err := Parse([]byte(lgs))
	if err != nil {
		t.Fatalf("a valid laser_guide_star section refused: %v", err)
	}
	if g := s.LaserGuideStar; g == nil || g.Height != 90000 || g.Thickness != 10000 || g.LaunchX != 1 || g.LaunchY != 0 || s.Science.OffsetX != 5 || s.Science.OffsetY != 0 {
		t.Fatalf("parsed %+v, science %+v", s.LaserGuideStar, s.Science)
	}
	if s, err := Parse([]byte(minimal)); err != nil || s.LaserGuideStar != nil {
		t.Fatalf("without the section the sensor must look at the natural star: %+v, %v", s.LaserGuideStar, err)
	}
	for _, c := range []struct{ name, old, new, want string }{
		{"height missing", "height_m: 90000, ", "", "laser_guide_star.height_m: missing: required, must be in [20000, 200000] m"},
		{"height too low", "height_m: 90000", "height_m: 5000", "laser_guide_star.height_m: 5000: must be in [20000, 200000] m"},
		{"thickness missing", "thickness_m: 10000, ", "", "laser_guide_star.thickness_m: missing: required"},
		{"thickness negative", "thickness_m: 10000", "thickness_m: -1", "laser_guide_star.thickness_m: -1: must be in [0, 50000] m"},
		{"launch beyond the telescope", "launch_x_m: 1", "launch_x_m: 3", "laser_guide_star.launch_x_m: 3: must be in [-2, 2] m"},
		{"unknown key", "launch_x_m: 1}", "launch_x_m: 1, power_w: 20}", "laser_guide_star.power_w: line"},
		{"offset too large", "offset_x_arcsec: 5", "offset_x_arcsec: 500", "science.offset_x_arcsec: 500: must be in [-120, 120] arcsec"},
	} {
		t.Run(c.name, func(t *testing.T) {
			doc := strings.Replace(lgs, c.old, c.new, 1)
			if doc == lgs {
				t.Fatalf("edit %q not applied", c.old)
			}
			s, err := Parse([]byte(doc))
			if err == nil || s != nil {
				t.Fatalf("accepted:\n%s", doc)
			}
			if !strings.Contains(err.Error(), c.want) {
				t.Errorf("error\n  %v\nwant it to contain\n  %s", err, c.want)
			}
		})
	}
}

// The tip_tilt section: every field is range-checked and named, the frame
// rate must divide the wavefront sensor's, and a refused section loads
// nothing.
func TestTipTiltFields(t *testing.T) {
	tt := minimal + "tip_tilt: {magnitude: 12, frame_rate_hz: 250, gain: 0.4, offload_gain: 0.05, stroke_rad: 1e-5}\n"
	s, err := Parse([]byte(tt))
	if err != nil {
		t.Fatalf("a valid tip_tilt section refused: %v", err)
	}
	want := TipTilt{Magnitude: 12, Wavelength: 8e-7, FrameRate: 250, Gain: 0.4, OffloadGain: 0.05, Stroke: 1e-5}
	if s.TipTilt == nil || *s.TipTilt != want || s.TipTiltRatio() != 4 {
		t.Fatalf("parsed %+v, want %+v (ratio 4)", s.TipTilt, want)
	}
	if s, err := Parse([]byte(minimal)); err != nil || s.TipTilt != nil {
		t.Fatalf("without the section there is no tip-tilt loop: %+v, %v", s.TipTilt, err)
	}
	for _, c := range []struct{ name, old, new, want string }{
		{"magnitude missing", "magnitude: 12, ", "", "tip_tilt.magnitude: missing: required, must be in [-2, 22]"},
		{"magnitude too faint", "magnitude: 12", "magnitude: 30", "tip_tilt.magnitude: 30: must be in [-2, 22]"},
		{"rate missing", "frame_rate_hz: 250, ", "", "tip_tilt.frame_rate_hz: missing: required, must be in (0, 1000] Hz"},
		{"rate above the sensor's", "frame_rate_hz: 250", "frame_rate_hz: 2000", "tip_tilt.frame_rate_hz: 2000: must be in (0, 1000] Hz (at most loop.frame_rate_hz)"},
		{"rate not a divisor", "frame_rate_hz: 250", "frame_rate_hz: 300", "tip_tilt.frame_rate_hz: 300: must be loop.frame_rate_hz (1000 Hz) divided by a whole number"},
		{"gain missing", "gain: 0.4, ", "", "tip_tilt.gain: missing: required, must be in [0, 2)"},
		{"gain unstable", "gain: 0.4", "gain: 2", "tip_tilt.gain: 2: must be in [0, 2)"},
		{"offload missing", "offload_gain: 0.05, ", "", "tip_tilt.offload_gain: missing: required, must be in (0, 1]"},
		{"offload zero", "offload_gain: 0.05", "offload_gain: 0", "tip_tilt.offload_gain: 0: must be in (0, 1]"},
		{"stroke missing", ", stroke_rad: 1e-5", "", "tip_tilt.stroke_rad: missing: required, must be in (0, 0.001] rad"},
		{"stroke negative", "stroke_rad: 1e-5", "stroke_rad: -1e-5", "tip_tilt.stroke_rad: -1e-05: must be in (0, 0.001] rad"},
		{"wavelength out of range", "magnitude: 12", "magnitude: 12, wavelength_m: 1e-8", "tip_tilt.wavelength_m: 1e-08: must be in [3e-07, 5e-06] m"},
		{"read noise negative", "magnitude: 12", "magnitude: 12, read_noise_e: -1", "tip_tilt.read_noise_e: -1: must be in [0, 100]"},
		{"unknown key", "stroke_rad: 1e-5}", "stroke_rad: 1e-5, integration_s: 1}", "tip_tilt.integration_s: line"},
	} {
		t.Run(c.name, func(t *testing.T) {
			doc := strings.Replace(tt, c.old, c.new, 1)
			if doc == tt {
				t.Fatalf("edit %q not applied", c.old)
			}
			s, err := Parse([]byte(doc))
			if err == nil || s != nil {
				t.Fatalf("accepted:\n%s", doc)
			}
			if !strings.Contains(err.Error(), c.want) {
				t.Errorf("error\n  %v\nwant it to contain\n  %s", err, c.want)
			}
		})
	}
}

// The lgs scenario runs the tip-tilt loop: its photon count and seeing disc
// follow the formulas of TipTiltPhotons and TipTiltSpotSigma, checked here
// by hand (magnitude 13: 10^(−5.2) of the zero point).
func TestLGSTipTilt(t *testing.T) {
	s, err := Load("lgs")
	if err != nil {
		t.Fatal(err)
	}
	tt := s.TipTilt
	if tt == nil || s.TipTiltRatio() != 2 {
		t.Fatalf("lgs tip_tilt %+v: want a section at half the laser sensor's rate", tt)
	}
	area := math.Pi / 4 * 64 * (1 - 0.14*0.14)
	if n, want := s.TipTiltPhotons(), 1e10*math.Pow(10, -5.2)*0.3*area/250; math.Abs(n-want) > 1e-9*want {
		t.Errorf("photons %g, want %g", n, want)
	}
	// r0 at 800 nm: 0.15·1.6^1.2 = 0.264 m; FWHM 0.98·800 nm/r0 = 2.97 µrad.
	if sg := s.TipTiltSpotSigma(); math.Abs(sg*2.3548-2.97e-6) > 0.01e-6 {
		t.Errorf("spot sigma %g rad: FWHM %g, want 2.97e-6", sg, sg*2.3548)
	}
}

// The wfs.pixels subsection (pixel mode): every field range-checked and
// named, the defaults filled in, a refused subsection loads nothing.
func TestPixelFields(t *testing.T) {
	px := strings.Replace(minimal, "wfs: {subapertures: 10, mode: geometric}",
		"wfs: {subapertures: 10, mode: geometric, pixels: {pixels_per_subaperture: 8, pixel_scale_rad: 1e-6, read_noise_e: 0.5, full_well_e: 60000, centroid: cog}}", 1)
	s, err := Parse([]byte(px))
	if err != nil {
		t.Fatalf("a valid wfs.pixels subsection refused: %v", err)
	}
	want := Pixels{PixelsPerSubaperture: 8, PixelScale: 1e-6, ReadNoise: 0.5, Bias: 100, FlatSeed: 1,
		FullWell: 60000, Gain: 1, Centroid: CentroidCoG}
	if s.WFS.Pixels == nil || *s.WFS.Pixels != want {
		t.Fatalf("parsed %+v, want %+v", s.WFS.Pixels, want)
	}
	if s, err := Parse([]byte(minimal)); err != nil || s.WFS.Pixels != nil {
		t.Fatalf("without the subsection the camera streams slopes: %+v, %v", s.WFS.Pixels, err)
	}
	const at = "wfs.pixels."
	for _, c := range []struct{ name, old, new, want string }{
		{"pixels missing", "pixels_per_subaperture: 8, ", "", at + "pixels_per_subaperture: missing: required, must be an integer in [2, 64]"},
		{"pixels too many", "pixels_per_subaperture: 8", "pixels_per_subaperture: 65", at + "pixels_per_subaperture: 65: must be an integer in [2, 64]"},
		{"scale missing", "pixel_scale_rad: 1e-6, ", "", at + "pixel_scale_rad: missing: required, must be in (0, 0.001] rad per pixel"},
		{"scale zero", "pixel_scale_rad: 1e-6", "pixel_scale_rad: 0", at + "pixel_scale_rad: 0: must be in (0, 0.001]"},
		{"read noise missing", "read_noise_e: 0.5, ", "", at + "read_noise_e: missing: required, must be in [0, 100]"},
		{"read noise negative", "read_noise_e: 0.5", "read_noise_e: -1", at + "read_noise_e: -1: must be in [0, 100]"},
		{"full well missing", "full_well_e: 60000, ", "", at + "full_well_e: missing: required, must be in [100, 1e+07]"},
		{"full well past 16 bits", "full_well_e: 60000", "full_well_e: 70000", at + "full_well_e: 70000 electrons at 1 e/ADU above a bias of 100 ADU: must fit 16 bits"},
		{"centroid missing", ", centroid: cog", "", at + `centroid: missing: required, must be "cog" or "wcog"`},
		{"centroid unknown", "centroid: cog", "centroid: quad", at + `centroid: "quad": must be "cog" or "wcog"`},
		{"weight without wcog", "centroid: cog", "centroid: cog, weight_sigma_px: 1", at + `weight_sigma_px: set with centroid "cog"`},
		{"weight zero", "centroid: cog", "centroid: wcog, weight_sigma_px: 0", at + "weight_sigma_px: 0: must be in (0, 64] pixels"},
		{"threshold one", "centroid: cog", "centroid: cog, threshold: 1", at + "threshold: 1: must be in [0, 1)"},
		{"background negative", "centroid: cog", "centroid: cog, background_e_per_pixel: -1", at + "background_e_per_pixel: -1: must be in [0, 100000]"},
		{"bias too high", "centroid: cog", "centroid: cog, bias_adu: 70000", at + "bias_adu: 70000: must be in [0, 60000] ADU"},
		{"dark negative", "centroid: cog", "centroid: cog, dark_e_per_pixel: -1", at + "dark_e_per_pixel: -1: must be in [0, 10000]"},
		{"flat too rough", "centroid: cog", "centroid: cog, flat_rms: 0.5", at + "flat_rms: 0.5: must be in [0, 0.3]"},
		{"gain zero", "centroid: cog", "centroid: cog, gain_e_per_adu: 0", at + "gain_e_per_adu: 0: must be in (0, 1000]"},
		{"unknown key", "centroid: cog", "centroid: cog, exposure_s: 1", at + "exposure_s: line"},
	} {
		t.Run(c.name, func(t *testing.T) {
			doc := strings.Replace(px, c.old, c.new, 1)
			if doc == px {
				t.Fatalf("edit %q not applied", c.old)
			}
			s, err := Parse([]byte(doc))
			if err == nil || s != nil {
				t.Fatalf("accepted:\n%s", doc)
			}
			if !strings.Contains(err.Error(), c.want) {
				t.Errorf("error\n  %v\nwant it to contain\n  %s", err, c.want)
			}
		})
	}
	// Round trip with the defaults written out, and with every field set.
	for _, wcog := range []bool{false, true} {
		if wcog {
			s.WFS.Pixels.Centroid, s.WFS.Pixels.WeightSigma, s.WFS.Pixels.FlatRMS = CentroidWCoG, 1.2, 0.02
		}
		data, err := s.YAML()
		if err != nil {
			t.Fatal(err)
		}
		back, err := Parse(data)
		if err != nil {
			t.Fatalf("reparse: %v\n%s", err, data)
		}
		if !reflect.DeepEqual(s, back) {
			t.Errorf("round trip differs:\n%+v\n%+v", s.WFS.Pixels, back.WFS.Pixels)
		}
	}
}
