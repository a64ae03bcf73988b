package scenario

import (
	"bytes"
	"embed"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"path"
	"reflect"
	"slices"
	"strings"

	"go.yaml.in/yaml/v3"
)

//go:embed builtin/*.yaml
var builtinFS embed.FS

// Builtin returns the sorted names of the embedded scenarios; Default is among them.
func Builtin() []string {
	entries, err := builtinFS.ReadDir("builtin")
	if err != nil {
		return nil
	}
	var names []string
	for _, e := range entries {
		if n, ok := strings.CutSuffix(e.Name(), ".yaml"); ok {
			names = append(names, n)
		}
	}
	slices.Sort(names)
	return names
}

// Load returns the built-in scenario called nameOrPath, or else parses the YAML
// file at that path.
func Load(nameOrPath string) (*Scenario, error) {
	if slices.Contains(Builtin(), nameOrPath) {
		data, err := builtinFS.ReadFile(path.Join("builtin", nameOrPath+".yaml"))
		if err != nil {
			return nil, fmt.Errorf("scenario %s: %w", nameOrPath, err)
		}
		return Parse(data)
	}
	data, err := os.ReadFile(nameOrPath)
	if err != nil {
		return nil, fmt.Errorf("scenario %q: not a built-in (%s) and not a readable file: %w",
			nameOrPath, strings.Join(Builtin(), ", "), err)
	}
	s, err := Parse(data)
	if err != nil {
		return nil, fmt.Errorf("%s: %w", nameOrPath, err)
	}
	return s, nil
}

// Parse decodes and validates one YAML scenario document. Unknown keys, missing
// required keys, wrong types and out-of-range values are all refused; the error
// lists every problem, each naming its field path and the allowed range.
func Parse(data []byte) (*Scenario, error) {
	dec := yaml.NewDecoder(bytes.NewReader(data))
	dec.KnownFields(true)
	var root yaml.Node
	if err := dec.Decode(&root); err != nil {
		if errors.Is(err, io.EOF) {
			return nil, errors.New("scenario: empty document")
		}
		return nil, fmt.Errorf("scenario: %w", err)
	}
	var extra yaml.Node
	if err := dec.Decode(&extra); !errors.Is(err, io.EOF) {
		return nil, errors.New("scenario: more than one YAML document")
	}
	var raw rawScenario
	if err := decodeNode(&root, reflect.ValueOf(&raw).Elem(), ""); err != nil {
		return nil, err
	}
	return validate(&raw)
}

// YAML encodes the scenario with every key present (defaults written out);
// Parse of the result gives back an equal Scenario.
func (s *Scenario) YAML() ([]byte, error) {
	var b bytes.Buffer
	enc := yaml.NewEncoder(&b)
	enc.SetIndent(2)
	if err := enc.Encode(s.toRaw()); err != nil {
		return nil, fmt.Errorf("scenario: encode: %w", err)
	}
	if err := enc.Close(); err != nil {
		return nil, fmt.Errorf("scenario: encode: %w", err)
	}
	return b.Bytes(), nil
}

// decodeNode fills v from n, naming the field path in every error. It is strict
// in the same way as a yaml.Decoder with KnownFields, and also refuses duplicate
// keys and null values, which the field path makes easy to report.
func decodeNode(n *yaml.Node, v reflect.Value, at string) error {
	if n.Kind == yaml.DocumentNode {
		if len(n.Content) != 1 {
			return errors.New("scenario: empty document")
		}
		return decodeNode(n.Content[0], v, at)
	}
	if n.Kind == yaml.AliasNode {
		return fmt.Errorf("scenario: %s: line %d: aliases are not allowed", where(at), n.Line)
	}
	if n.Kind == yaml.ScalarNode && n.Tag == "!!null" {
		return fmt.Errorf("scenario: %s: line %d: null value: give a value or leave the key out", where(at), n.Line)
	}
	if v.Kind() == reflect.Pointer {
		v.Set(reflect.New(v.Type().Elem()))
		return decodeNode(n, v.Elem(), at)
	}
	switch v.Kind() {
	case reflect.Struct:
		if n.Kind != yaml.MappingNode {
			return fmt.Errorf("scenario: %s: line %d: must be a mapping of keys to values", where(at), n.Line)
		}
		seen := map[string]bool{}
		for i := 0; i+1 < len(n.Content); i += 2 {
			key, val := n.Content[i].Value, n.Content[i+1]
			p := join(at, key)
			if seen[key] {
				return fmt.Errorf("scenario: %s: line %d: duplicate key", p, n.Content[i].Line)
			}
			seen[key] = true
			f, ok := fieldByTag(v, key)
			if !ok {
				return fmt.Errorf("scenario: %s: line %d: unknown key (allowed: %s)",
					p, n.Content[i].Line, strings.Join(tags(v.Type()), ", "))
			}
			if err := decodeNode(val, f, p); err != nil {
				return err
			}
		}
		return nil
	case reflect.Slice:
		if n.Kind != yaml.SequenceNode {
			return fmt.Errorf("scenario: %s: line %d: must be a list", where(at), n.Line)
		}
		v.Set(reflect.MakeSlice(v.Type(), len(n.Content), len(n.Content)))
		for i, c := range n.Content {
			if err := decodeNode(c, v.Index(i), fmt.Sprintf("%s[%d]", at, i)); err != nil {
				return err
			}
		}
		return nil
	default:
		if n.Kind != yaml.ScalarNode {
			return fmt.Errorf("scenario: %s: line %d: must be a single %s value", where(at), n.Line, v.Kind())
		}
		// yaml.v3 would truncate 10.5 into an int; demand an integer literal.
		isInt := v.Kind() >= reflect.Int && v.Kind() <= reflect.Int64
		if err := n.Decode(v.Addr().Interface()); err != nil || (isInt && n.ShortTag() != "!!int") {
			return fmt.Errorf("scenario: %s: line %d: %q is not a valid %s", at, n.Line, n.Value, v.Kind())
		}
		return nil
	}
}

func where(at string) string {
	if at == "" {
		return "document"
	}
	return at
}

func join(at, key string) string {
	if at == "" {
		return key
	}
	return at + "." + key
}

func yamlName(f reflect.StructField) string {
	name, _, _ := strings.Cut(f.Tag.Get("yaml"), ",")
	return name
}

func fieldByTag(v reflect.Value, key string) (reflect.Value, bool) {
	t := v.Type()
	for i := range t.NumField() {
		if yamlName(t.Field(i)) == key {
			return v.Field(i), true
		}
	}
	return reflect.Value{}, false
}

func tags(t reflect.Type) []string {
	out := make([]string, t.NumField())
	for i := range out {
		out[i] = yamlName(t.Field(i))
	}
	return out
}

// span is a closed or half-open interval used for range checks and messages.
type span struct {
	lo, hi         float64
	openLo, openHi bool
}

func (r span) contains(x float64) bool {
	if math.IsNaN(x) {
		return false
	}
	okLo := x > r.lo || (!r.openLo && x == r.lo)
	okHi := x < r.hi || (!r.openHi && x == r.hi)
	return okLo && okHi
}

func (r span) String() string {
	if math.IsInf(r.hi, 1) {
		if r.openLo {
			return fmt.Sprintf("must be > %g", r.lo)
		}
		return fmt.Sprintf("must be >= %g", r.lo)
	}
	l, h := "[", "]"
	if r.openLo {
		l = "("
	}
	if r.openHi {
		h = ")"
	}
	return fmt.Sprintf("must be in %s%g, %g%s", l, r.lo, r.hi, h)
}

func closed(lo, hi float64) span   { return span{lo: lo, hi: hi} }
func openLow(lo, hi float64) span  { return span{lo: lo, hi: hi, openLo: true} }
func openHigh(lo, hi float64) span { return span{lo: lo, hi: hi, openHi: true} }

// checker collects every validation problem so the user sees them all at once.
type checker struct{ errs []error }

func (c *checker) fail(at, format string, args ...any) {
	c.errs = append(c.errs, fmt.Errorf("scenario: %s: %s", at, fmt.Sprintf(format, args...)))
}

// float returns *p if it is in r; a nil p is missing (required) unless def is given.
func (c *checker) float(at string, p *float64, r span, unit string, def ...float64) float64 {
	if p == nil {
		if len(def) > 0 {
			return def[0]
		}
		c.fail(at, "missing: required, %s%s", r, unit)
		return math.NaN()
	}
	if !r.contains(*p) {
		c.fail(at, "%g: %s%s", *p, r, unit)
	}
	return *p
}

func (c *checker) int(at string, p *int, lo, hi int, def ...int) int {
	if p == nil {
		if len(def) > 0 {
			return def[0]
		}
		c.fail(at, "missing: required, must be an integer in [%d, %d]", lo, hi)
		return 0
	}
	if *p < lo || *p > hi {
		c.fail(at, "%d: must be an integer in [%d, %d]", *p, lo, hi)
	}
	return *p
}

func (c *checker) section(at string, present bool) bool {
	if !present {
		c.fail(at, "missing: required section")
	}
	return present
}

func str(p *string, def string) string {
	if p == nil {
		return def
	}
	return *p
}

// validate converts raw into a Scenario or reports every problem found.
func validate(r *rawScenario) (*Scenario, error) {
	var c checker
	s := &Scenario{Description: str(r.Description, "")}
	if r.Name == nil || strings.TrimSpace(*r.Name) == "" {
		c.fail("name", "missing: required, a non-empty string")
	} else {
		s.Name = *r.Name
	}
	if c.section("telescope", r.Telescope != nil) {
		t := r.Telescope
		s.Telescope = Telescope{
			Name:         str(t.Name, ""),
			Site:         str(t.Site, ""),
			Diameter:     c.float("telescope.diameter_m", t.Diameter, openLow(0, 100), " m"),
			Obstruction:  c.float("telescope.obstruction", t.Obstruction, closed(0, 0.9), " (fraction of the diameter)"),
			Spiders:      c.int("telescope.spiders", t.Spiders, 0, 16, 0),
			PupilSamples: c.int("telescope.pupil_samples", t.PupilSamples, 8, 4096),
		}
		if d := s.Telescope.Diameter; d > 0 {
			s.Telescope.SpiderWidth = c.float("telescope.spider_width_m", t.SpiderWidth, closed(0, d/10), " m (diameter_m/10)", 0)
		}
	}
	switch {
	case r.Eye != nil && r.Atmosphere != nil:
		c.fail("eye", "a scenario has either an atmosphere or an eye section, not both")
	}
	if r.Eye == nil && c.section("atmosphere", r.Atmosphere != nil) {
		a := r.Atmosphere
		s.Atmosphere = Atmosphere{
			R0:        c.float("atmosphere.r0_m", a.R0, openLow(0, 5), " m at 500 nm"),
			L0:        c.float("atmosphere.l0_m", a.L0, openLow(0, 1e6), " m"),
			ZenithDeg: c.float("atmosphere.zenith_deg", a.ZenithDeg, closed(0, 75), " degrees", 0),
			Seed:      1,
		}
		if a.Seed != nil {
			s.Atmosphere.Seed = *a.Seed
		}
		s.Atmosphere.Layers = c.layers(a.Layers)
	}
	if c.section("guide_star", r.GuideStar != nil) {
		g := r.GuideStar
		s.GuideStar = GuideStar{
			Magnitude:  c.float("guide_star.magnitude", g.Magnitude, closed(-2, 25), ""),
			Wavelength: c.float("guide_star.wavelength_m", g.Wavelength, closed(3e-7, 5e-6), " m"),
			ZeroPoint:  c.float("guide_star.zero_point_photons_per_s_per_m2", g.ZeroPoint, openLow(0, 1e13), " photons/s/m²"),
			Throughput: c.float("guide_star.throughput", g.Throughput, openLow(0, 1), ""),
		}
	}
	if g := r.LGS; g != nil {
		s.LaserGuideStar = &LaserGuideStar{
			Height:    c.float("laser_guide_star.height_m", g.Height, closed(20000, 200000), " m above the telescope"),
			Thickness: c.float("laser_guide_star.thickness_m", g.Thickness, closed(0, 50000), " m"),
		}
		if d := s.Telescope.Diameter; d > 0 {
			s.LaserGuideStar.LaunchX = c.float("laser_guide_star.launch_x_m", g.LaunchX, closed(-d, d), " m (± telescope.diameter_m)", 0)
			s.LaserGuideStar.LaunchY = c.float("laser_guide_star.launch_y_m", g.LaunchY, closed(-d, d), " m (± telescope.diameter_m)", 0)
		}
	}
	if c.section("wfs", r.WFS != nil) {
		s.WFS = c.wfs(r.WFS, s)
	}
	if c.section("dm", r.DM != nil) {
		d := r.DM
		s.DM = DM{
			Actuators: c.int("dm.actuators", d.Actuators, 2, 257),
			Coupling:  c.float("dm.coupling", d.Coupling, closed(0.01, 0.6), ""),
			Stroke:    c.float("dm.stroke_m", d.Stroke, openLow(0, 1e-4), " m"),
			Margin:    c.float("dm.margin_pitches", d.Margin, closed(0, 3), " actuator pitches", 0.75),
		}
		if n := s.WFS.Subapertures; n > 0 && d.Actuators != nil && s.DM.Actuators != n+1 {
			c.fail("dm.actuators", "%d: must be wfs.subapertures+1 = %d (Fried geometry)", s.DM.Actuators, n+1)
		}
	}
	if c.section("loop", r.Loop != nil) {
		s.Loop = Loop{
			FrameRate:   c.float("loop.frame_rate_hz", r.Loop.FrameRate, openLow(0, 1e5), " Hz"),
			DelayFrames: c.int("loop.delay_frames", r.Loop.DelayFrames, 0, 10),
		}
	}
	if c.section("science", r.Science != nil) {
		s.Science.Wavelength = c.float("science.wavelength_m", r.Science.Wavelength, closed(3e-7, 2.5e-5), " m")
		s.Science.OffsetX = c.float("science.offset_x_arcsec", r.Science.OffsetX, closed(-120, 120), " arcsec", 0)
		s.Science.OffsetY = c.float("science.offset_y_arcsec", r.Science.OffsetY, closed(-120, 120), " arcsec", 0)
	}
	if r.Eye != nil {
		s.Eye = c.eye(r.Eye, s)
	}
	if r.TipTilt != nil {
		s.TipTilt = c.tipTilt(r.TipTilt, r, s)
	}
	s.Clouds = c.clouds(r.Clouds, r)
	if r.Supervisor != nil {
		s.Supervisor = c.supervisor(r.Supervisor)
	}
	if len(c.errs) > 0 {
		return nil, errors.Join(c.errs...)
	}
	return s, nil
}

// tipTilt checks the tip_tilt section: the natural-star sensor's frame rate
// must divide the wavefront sensor's, so that a lockstep bench produces one
// tip-tilt frame every loop.frame_rate_hz/frame_rate_hz frames.
func (c *checker) tipTilt(t *rawTipTilt, r *rawScenario, s *Scenario) *TipTilt {
	out := &TipTilt{
		Magnitude:   c.float("tip_tilt.magnitude", t.Magnitude, closed(-2, 22), ""),
		Wavelength:  c.float("tip_tilt.wavelength_m", t.Wavelength, closed(3e-7, 5e-6), " m", 8e-7),
		ReadNoise:   c.float("tip_tilt.read_noise_e", t.ReadNoise, closed(0, 100), " electrons rms per quadrant", 0),
		Gain:        c.float("tip_tilt.gain", t.Gain, openHigh(0, 2), ""),
		OffloadGain: c.float("tip_tilt.offload_gain", t.OffloadGain, openLow(0, 1), " (fraction of the deformable mirror's tip-tilt moved per frame)"),
		Stroke:      c.float("tip_tilt.stroke_rad", t.Stroke, openLow(0, 1e-3), " rad of tilt on the sky"),
	}
	if r.Eye != nil {
		c.fail("tip_tilt", "needs the atmosphere: a scenario with an eye section has no natural star")
	}
	fr := s.Loop.FrameRate
	if !(fr > 0) {
		out.FrameRate = c.float("tip_tilt.frame_rate_hz", t.FrameRate, openLow(0, 1e5), " Hz")
		return out
	}
	out.FrameRate = c.float("tip_tilt.frame_rate_hz", t.FrameRate, openLow(0, fr), " Hz (at most loop.frame_rate_hz)")
	if t.FrameRate != nil && out.FrameRate > 0 && out.FrameRate <= fr {
		if n := math.Round(fr / out.FrameRate); math.Abs(fr/out.FrameRate-n) > 1e-9*n {
			c.fail("tip_tilt.frame_rate_hz", "%g: must be loop.frame_rate_hz (%g Hz) divided by a whole number", out.FrameRate, fr)
		}
	}
	return out
}

func (c *checker) layers(raw []*rawLayer) []Layer {
	if len(raw) == 0 {
		c.fail("atmosphere.layers", "missing: required, a list of 1 to 16 layers")
		return nil
	}
	if len(raw) > 16 {
		c.fail("atmosphere.layers", "%d layers: must be 1 to 16", len(raw))
	}
	out := make([]Layer, len(raw))
	sum := 0.0
	for i, l := range raw {
		at := fmt.Sprintf("atmosphere.layers[%d].", i)
		out[i] = Layer{
			Altitude:         c.float(at+"altitude_m", l.Altitude, closed(0, 30000), " m"),
			Fraction:         c.float(at+"fraction", l.Fraction, openLow(0, 1), ""),
			WindSpeed:        c.float(at+"wind_speed_m_per_s", l.WindSpeed, closed(0, 100), " m/s"),
			WindDirectionDeg: c.float(at+"wind_direction_deg", l.WindDirectionDeg, closed(-360, 360), " degrees"),
		}
		sum += out[i].Fraction
	}
	if !(math.Abs(sum-1) <= 1e-6) {
		c.fail("atmosphere.layers", "fractions sum to %g: must sum to 1 (within 1e-6)", sum)
	}
	return out
}

func (c *checker) wfs(w *rawWFS, s *Scenario) WFS {
	out := WFS{
		Subapertures:      c.int("wfs.subapertures", w.Subapertures, 1, 256),
		Mode:              str(w.Mode, ""),
		ValidThreshold:    c.float("wfs.valid_threshold", w.ValidThreshold, openLow(0, 1), "", 0.5),
		ReadNoise:         c.float("wfs.read_noise_e", w.ReadNoise, closed(0, 100), " electrons rms", 0),
		Background:        c.float("wfs.background_e_per_pixel", w.Background, closed(0, 1e6), " electrons per pixel per frame", 0),
		CentroidThreshold: c.float("wfs.centroid_threshold", w.CentroidThreshold, openHigh(0, 1), " (fraction of the brightest pixel)", 0),
		Noise:             w.Noise == nil || *w.Noise,
	}
	switch {
	case w.Mode == nil:
		c.fail("wfs.mode", "missing: required, must be %q or %q", ModeGeometric, ModeDiffractive)
	case out.Mode != ModeGeometric && out.Mode != ModeDiffractive:
		c.fail("wfs.mode", "%q: must be %q or %q", out.Mode, ModeGeometric, ModeDiffractive)
	}
	if w.Pixels != nil {
		out.Pixels = c.pixels(w.Pixels)
	}
	n, samples := out.Subapertures, s.Telescope.PupilSamples
	if n < 1 || samples < 1 || w.Subapertures == nil {
		return out
	}
	per := samples / n
	if samples%n != 0 || per < 2 {
		c.fail("telescope.pupil_samples", "%d: must be a multiple of wfs.subapertures (%d) with at least 2 samples per subaperture", samples, n)
		return out
	}
	out.PixelsPerSubaperture = c.int("wfs.pixels_per_subaperture", w.PixelsPerSubaperture, 2, 64, 2*per)
	lambda, d := s.GuideStar.Wavelength, s.Telescope.Diameter/float64(n)
	if !(lambda > 0) || !(d > 0) {
		return out
	}
	out.PixelScale = c.float("wfs.pixel_scale_rad", w.PixelScale, openLow(0, 1e-3), " rad per pixel", lambda/(2*d))
	// The FFT of a subaperture sampled every δ = d/per metres represents a field of
	// λ/δ radians; a detector wider than that would see the spot's periodic copies.
	field := lambda * float64(per) / d
	if out.Mode == ModeDiffractive && float64(out.PixelsPerSubaperture)*out.PixelScale > field*(1+1e-9) {
		c.fail("wfs.pixels_per_subaperture", "%d pixels of %g rad: detector field must be <= λ/δ = %g rad (increase telescope.pupil_samples)",
			out.PixelsPerSubaperture, out.PixelScale, field)
	}
	return out
}

// pixels checks the wfs.pixels subsection (pixel mode). The full well, in
// ADU above the bias, must fit the 16-bit converter.
func (c *checker) pixels(p *rawPixels) *Pixels {
	const at = "wfs.pixels."
	out := &Pixels{
		PixelsPerSubaperture: c.int(at+"pixels_per_subaperture", p.PixelsPerSubaperture, 2, 64),
		PixelScale:           c.float(at+"pixel_scale_rad", p.PixelScale, openLow(0, 1e-3), " rad per pixel"),
		ReadNoise:            c.float(at+"read_noise_e", p.ReadNoise, closed(0, 100), " electrons rms"),
		Background:           c.float(at+"background_e_per_pixel", p.Background, closed(0, 1e5), " electrons per pixel per frame", 0),
		Bias:                 c.float(at+"bias_adu", p.Bias, closed(0, 60000), " ADU", 100),
		Dark:                 c.float(at+"dark_e_per_pixel", p.Dark, closed(0, 1e4), " electrons per pixel per frame", 0),
		FlatRMS:              c.float(at+"flat_rms", p.FlatRMS, closed(0, 0.3), " (rms fraction)", 0),
		FlatSeed:             1,
		FullWell:             c.float(at+"full_well_e", p.FullWell, closed(100, 1e7), " electrons"),
		Gain:                 c.float(at+"gain_e_per_adu", p.Gain, openLow(0, 1000), " electrons per ADU", 1),
		Centroid:             str(p.Centroid, ""),
		Threshold:            c.float(at+"threshold", p.Threshold, openHigh(0, 1), " (fraction of the brightest pixel)", 0),
	}
	if p.FlatSeed != nil {
		out.FlatSeed = *p.FlatSeed
	}
	switch {
	case p.Centroid == nil:
		c.fail(at+"centroid", "missing: required, must be %q or %q", CentroidCoG, CentroidWCoG)
	case out.Centroid != CentroidCoG && out.Centroid != CentroidWCoG:
		c.fail(at+"centroid", "%q: must be %q or %q", out.Centroid, CentroidCoG, CentroidWCoG)
	}
	if p.WeightSigma != nil {
		if out.Centroid != CentroidWCoG {
			c.fail(at+"weight_sigma_px", "set with centroid %q: only centroid %q has a weight", out.Centroid, CentroidWCoG)
		}
		out.WeightSigma = c.float(at+"weight_sigma_px", p.WeightSigma, openLow(0, 64), " pixels")
	}
	if g := out.Gain; g > 0 && out.FullWell > 0 && out.Bias+out.FullWell/g > 65535 {
		c.fail(at+"full_well_e", "%g electrons at %g e/ADU above a bias of %g ADU: must fit 16 bits (bias_adu + full_well_e/gain_e_per_adu <= 65535)",
			out.FullWell, g, out.Bias)
	}
	return out
}
