package sweep

import (
	"bytes"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"path/filepath"
	"regexp"
	"slices"
	"strconv"
	"strings"

	"go.yaml.in/yaml/v3"

	"stillsky/sim/scenario"
)

// Gain is the field name of the integrator gain, the loop setting a sweep can vary.
const Gain = "gain"

// Default frames of each phase of a run.
const (
	DefaultFramesOpen   = 500
	DefaultFramesClosed = 2000
)

// maxPoints bounds a sweep: the completions of a Kubernetes Indexed Job with a
// per-index backoff limit are limited to 100,000 (Kubernetes API reference, JobSpec).
const maxPoints = 100000

// maxFrames bounds each phase of a run (a long run at 1 kHz is a few hours).
const maxFrames = 10_000_000

// Setting is one field's value at a point.
type Setting struct {
	// Field is Gain or a scenario YAML path such as atmosphere.r0_m.
	Field string `json:"field"`
	// Value is a float64 (every number), a bool or a string.
	Value any `json:"value"`
}

// Point is one run of a sweep, validated.
type Point struct {
	// Index is the point's position, 0-based: the grid's combinations in order
	// (first axis slowest), or the list's entries.
	Index int
	// Settings are the values that vary across the sweep, in the spec's order.
	Settings []Setting
	// Gain of the integrator in closed loop; nil keeps the daemon's default.
	Gain *float64
	// Scenario is the point's scenario as YAML, every key written out.
	Scenario []byte
	// ScenarioName is the scenario's name field.
	ScenarioName string
	// DelayFrames is the scenario's loop delay, which the lockstep bench models.
	DelayFrames int
}

// Spec is a validated sweep: its points and run lengths.
type Spec struct {
	// Name is the sweep's name (YAML "name", default the spec file's base name).
	Name string
	// FramesOpen and FramesClosed are the frames of each phase of every run.
	FramesOpen, FramesClosed int
	// Points are every run, in index order.
	Points []Point
	// Axes are the fields that vary, in the spec's order.
	Axes []string
	// Source is the spec as given, and BaseScenario the scenario it names, as YAML
	// with every key written out (the Kubernetes ConfigMap holds both).
	Source, BaseScenario []byte
}

// rawSpec mirrors the YAML file; grid, set and points keep their nodes so that
// their order and line numbers survive.
type rawSpec struct {
	Name, Scenario           string
	FramesOpen, FramesClosed *int
	Set, Grid                yaml.Node
	Points                   []yaml.Node
}

// Load reads and validates the spec at path; a relative scenario path in it is
// taken relative to the spec's directory.
func Load(path string) (*Spec, error) {
	data, err := os.ReadFile(path)
	if err != nil {
		return nil, err
	}
	name := strings.TrimSuffix(filepath.Base(path), filepath.Ext(path))
	s, err := Parse(data, name, filepath.Dir(path))
	if err != nil {
		return nil, fmt.Errorf("%s: %w", path, err)
	}
	return s, nil
}

// Parse validates a spec: unknown keys, empty axes, unknown fields, values of the
// wrong type or out of range are refused with the field named, and every point's
// scenario is built and validated, before anything runs. name is the default
// name and dir the directory of relative scenario paths.
func Parse(data []byte, name, dir string) (*Spec, error) {
	var root yaml.Node
	if err := yaml.NewDecoder(bytes.NewReader(data)).Decode(&root); err != nil {
		if errors.Is(err, io.EOF) {
			return nil, errors.New("sweep: empty spec")
		}
		return nil, fmt.Errorf("sweep: %w", err)
	}
	raw, err := decodeRaw(&root)
	if err != nil {
		return nil, err
	}
	if raw.Name != "" {
		name = raw.Name
	}
	if err := checkName(name); err != nil {
		return nil, err
	}
	s := &Spec{Name: name, FramesOpen: DefaultFramesOpen, FramesClosed: DefaultFramesClosed, Source: data}
	for _, f := range []struct {
		key string
		v   *int
		dst *int
	}{{"frames_open", raw.FramesOpen, &s.FramesOpen}, {"frames_closed", raw.FramesClosed, &s.FramesClosed}} {
		if f.v == nil {
			continue
		}
		if *f.v < 1 || *f.v > maxFrames {
			return nil, fmt.Errorf("sweep: %s: %d out of range [1, %d]", f.key, *f.v, maxFrames)
		}
		*f.dst = *f.v
	}

	scnName := raw.Scenario
	if scnName == "" {
		scnName = scenario.Default
	}
	if !slices.Contains(scenario.Builtin(), scnName) && !filepath.IsAbs(scnName) {
		scnName = filepath.Join(dir, scnName)
	}
	base, err := scenario.Load(scnName)
	if err != nil {
		return nil, fmt.Errorf("sweep: scenario: %w", err)
	}
	if s.BaseScenario, err = base.YAML(); err != nil {
		return nil, err
	}

	fixed, err := settings(&raw.Set, "set")
	if err != nil {
		return nil, err
	}
	var combos [][]field
	hasGrid, hasList := raw.Grid.Kind != 0, raw.Points != nil
	switch {
	case hasGrid && hasList:
		return nil, errors.New("sweep: give grid or points, not both")
	case hasGrid:
		combos, s.Axes, err = grid(&raw.Grid)
	case hasList:
		combos, s.Axes, err = list(raw.Points)
	default:
		return nil, errors.New("sweep: no grid and no points: nothing to run")
	}
	if err != nil {
		return nil, err
	}
	for _, a := range s.Axes {
		for _, f := range fixed {
			if f.name == a {
				return nil, fmt.Errorf("sweep: set.%s: also varied by the sweep", a)
			}
		}
	}
	for i, combo := range combos {
		p, err := build(s.BaseScenario, append(slices.Clone(fixed), combo...), i)
		if err != nil {
			return nil, err
		}
		s.Points = append(s.Points, *p)
	}
	return s, nil
}

// decodeRaw decodes the spec's top level key by key, so that an unknown key or
// a value of the wrong type is reported with its key.
func decodeRaw(doc *yaml.Node) (*rawSpec, error) {
	n := doc.Content[0]
	if n.Kind != yaml.MappingNode {
		return nil, fmt.Errorf("sweep: line %d: the spec must be a mapping of keys to values", n.Line)
	}
	raw := &rawSpec{}
	targets := map[string]any{
		"name": &raw.Name, "scenario": &raw.Scenario, "frames_open": &raw.FramesOpen,
		"frames_closed": &raw.FramesClosed, "set": &raw.Set, "grid": &raw.Grid, "points": &raw.Points,
	}
	allowed := []string{"name", "scenario", "frames_open", "frames_closed", "set", "grid", "points"}
	seen := map[string]bool{}
	for i := 0; i+1 < len(n.Content); i += 2 {
		k, v := n.Content[i], n.Content[i+1]
		target, ok := targets[k.Value]
		if !ok {
			return nil, fmt.Errorf("sweep: %s: line %d: unknown key (allowed: %s)", k.Value, k.Line, strings.Join(allowed, ", "))
		}
		if seen[k.Value] {
			return nil, fmt.Errorf("sweep: %s: line %d: duplicate key", k.Value, k.Line)
		}
		seen[k.Value] = true
		// yaml would truncate 10.5 into an int: demand an integer literal.
		isInt := k.Value == "frames_open" || k.Value == "frames_closed"
		if err := v.Decode(target); err != nil || (isInt && v.ShortTag() != "!!int") {
			return nil, fmt.Errorf("sweep: %s: line %d: %q is not a valid value", k.Value, v.Line, v.Value)
		}
	}
	return raw, nil
}

// checkName accepts what a Kubernetes object name built from it allows: a
// DNS-1123 label (RFC 1123), short enough for the "-results" suffixes.
func checkName(n string) error {
	ok := n != "" && len(n) <= 40
	for i, r := range n {
		alnum := (r >= 'a' && r <= 'z') || (r >= '0' && r <= '9')
		if !alnum && (r != '-' || i == 0 || i == len(n)-1) {
			ok = false
		}
	}
	if !ok {
		return fmt.Errorf("sweep: name %q: use 1 to 40 lower-case letters, digits and inner '-' (give name: in the spec)", n)
	}
	return nil
}

// field is one setting with the node it came from, for its type and line.
type field struct {
	name string
	at   string // where it was written, e.g. grid.gain[2]
	node *yaml.Node
}

// settings reads a mapping of field to single value (set:, or one list entry).
func settings(n *yaml.Node, at string) ([]field, error) {
	if n.Kind == 0 {
		return nil, nil
	}
	if n.Kind != yaml.MappingNode {
		return nil, fmt.Errorf("sweep: %s: line %d: must be a mapping of fields to values", at, n.Line)
	}
	var out []field
	for i := 0; i+1 < len(n.Content); i += 2 {
		k, v := n.Content[i], n.Content[i+1]
		p := at + "." + k.Value
		if slices.ContainsFunc(out, func(f field) bool { return f.name == k.Value }) {
			return nil, fmt.Errorf("sweep: %s: line %d: duplicate field", p, k.Line)
		}
		if v.Kind != yaml.ScalarNode {
			return nil, fmt.Errorf("sweep: %s: line %d: must be a single value", p, v.Line)
		}
		out = append(out, field{name: k.Value, at: p, node: v})
	}
	if len(out) == 0 {
		return nil, fmt.Errorf("sweep: %s: line %d: no fields", at, n.Line)
	}
	return out, nil
}

// grid expands the axes into every combination, the first axis slowest.
func grid(n *yaml.Node) ([][]field, []string, error) {
	if n.Kind != yaml.MappingNode || len(n.Content) == 0 {
		return nil, nil, fmt.Errorf("sweep: grid: line %d: must be a mapping of fields to lists of values", n.Line)
	}
	var axes []string
	var values [][]field
	total := 1
	for i := 0; i+1 < len(n.Content); i += 2 {
		k, v := n.Content[i], n.Content[i+1]
		at := "grid." + k.Value
		if slices.Contains(axes, k.Value) {
			return nil, nil, fmt.Errorf("sweep: %s: line %d: duplicate axis", at, k.Line)
		}
		if v.Kind != yaml.SequenceNode {
			return nil, nil, fmt.Errorf("sweep: %s: line %d: must be a list of values", at, v.Line)
		}
		if len(v.Content) == 0 {
			return nil, nil, fmt.Errorf("sweep: %s: line %d: empty axis", at, v.Line)
		}
		var axis []field
		for j, c := range v.Content {
			p := fmt.Sprintf("%s[%d]", at, j)
			if c.Kind != yaml.ScalarNode {
				return nil, nil, fmt.Errorf("sweep: %s: line %d: must be a single value", p, c.Line)
			}
			axis = append(axis, field{name: k.Value, at: p, node: c})
		}
		axes = append(axes, k.Value)
		values = append(values, axis)
		if total *= len(axis); total > maxPoints {
			return nil, nil, fmt.Errorf("sweep: grid: more than %d points", maxPoints)
		}
	}
	combos := make([][]field, total)
	for i := range combos {
		r := i
		combo := make([]field, len(values))
		for a := len(values) - 1; a >= 0; a-- {
			combo[a] = values[a][r%len(values[a])]
			r /= len(values[a])
		}
		combos[i] = combo
	}
	return combos, axes, nil
}

// list reads the points: entries, each a mapping of fields to values.
func list(entries []yaml.Node) ([][]field, []string, error) {
	if len(entries) == 0 {
		return nil, nil, errors.New("sweep: points: empty list")
	}
	if len(entries) > maxPoints {
		return nil, nil, fmt.Errorf("sweep: points: more than %d points", maxPoints)
	}
	var axes []string
	combos := make([][]field, len(entries))
	for i := range entries {
		fs, err := settings(&entries[i], fmt.Sprintf("points[%d]", i))
		if err != nil {
			return nil, nil, err
		}
		for _, f := range fs {
			if !slices.Contains(axes, f.name) {
				axes = append(axes, f.name)
			}
		}
		combos[i] = fs
	}
	return combos, axes, nil
}

// build applies the fields to the base scenario and validates the result.
func build(base []byte, fields []field, index int) (*Point, error) {
	var doc yaml.Node
	if err := yaml.Unmarshal(base, &doc); err != nil {
		return nil, err
	}
	p := &Point{Index: index}
	for _, f := range fields {
		v, err := apply(&doc, f)
		if err != nil {
			return nil, err
		}
		if !strings.HasPrefix(f.at, "set.") {
			p.Settings = append(p.Settings, Setting{Field: f.name, Value: v})
		}
		if f.name == Gain {
			g := v.(float64)
			p.Gain = &g
		}
	}
	out, err := yaml.Marshal(&doc)
	if err != nil {
		return nil, err
	}
	scn, err := scenario.Parse(out)
	if err != nil {
		// The scenario's errors name the field; their line numbers are those of
		// the generated document, not of the spec, so they are left out.
		msg := lineNumber.ReplaceAllString(err.Error(), "")
		return nil, fmt.Errorf("sweep: point %d (%s): %s", index, Describe(p.Settings), msg)
	}
	if scn.Loop.DelayFrames < 1 {
		return nil, fmt.Errorf("sweep: point %d (%s): loop.delay_frames %d: a lockstep run needs at least 1", index, Describe(p.Settings), scn.Loop.DelayFrames)
	}
	p.Scenario, p.ScenarioName, p.DelayFrames = out, scn.Name, scn.Loop.DelayFrames
	return p, nil
}

// apply sets one field: the gain is checked here, a scenario key is replaced in
// doc (its range is checked by the scenario's validation afterwards). It returns
// the value decoded.
func apply(doc *yaml.Node, f field) (any, error) {
	if f.name == Gain {
		var g float64
		if err := f.node.Decode(&g); err != nil || f.node.ShortTag() == "!!str" {
			return nil, fmt.Errorf("sweep: %s: line %d: %q is not a number", f.at, f.node.Line, f.node.Value)
		}
		// The daemon's SetGain range (control.proto).
		if !(g >= 0 && g < 2) {
			return nil, fmt.Errorf("sweep: %s: line %d: gain %v out of range [0, 2)", f.at, f.node.Line, g)
		}
		return g, nil
	}
	target, err := lookup(doc, f.name)
	if err != nil {
		return nil, fmt.Errorf("sweep: %s: line %d: %v", f.at, f.node.Line, err)
	}
	tag, newTag := target.ShortTag(), f.node.ShortTag()
	numeric := func(t string) bool { return t == "!!int" || t == "!!float" }
	if tag != newTag && !(numeric(tag) && numeric(newTag)) {
		return nil, fmt.Errorf("sweep: %s: line %d: %q: want a %s like %s", f.at, f.node.Line, f.node.Value, kind(tag), target.Value)
	}
	// An integer field given a fraction is refused by the scenario's validation.
	target.Value, target.Tag, target.Style = f.node.Value, newTag, f.node.Style&^yaml.TaggedStyle
	var v any
	var err2 error
	switch {
	case numeric(tag):
		var x float64
		err2 = f.node.Decode(&x)
		if err2 == nil && (math.IsNaN(x) || math.IsInf(x, 0)) {
			err2 = fmt.Errorf("%v is not finite", x)
		}
		v = x
	case tag == "!!bool":
		var x bool
		err2 = f.node.Decode(&x)
		v = x
	default:
		v = f.node.Value
	}
	if err2 != nil {
		return nil, fmt.Errorf("sweep: %s: line %d: %v", f.at, f.node.Line, err2)
	}
	return v, nil
}

func kind(tag string) string {
	switch tag {
	case "!!float":
		return "number"
	case "!!int":
		return "integer"
	case "!!bool":
		return "true or false"
	}
	return "string"
}

// lookup finds the scalar node at a scenario path such as
// atmosphere.layers[1].wind_speed_m_per_s.
func lookup(doc *yaml.Node, path string) (*yaml.Node, error) {
	n := doc
	if n.Kind == yaml.DocumentNode {
		n = n.Content[0]
	}
	at := ""
	for _, part := range strings.Split(path, ".") {
		key, idx, hasIdx := strings.Cut(part, "[")
		if n.Kind != yaml.MappingNode {
			return nil, fmt.Errorf("unknown field %s: %s is a single value", path, at)
		}
		var next *yaml.Node
		var keys []string
		for i := 0; i+1 < len(n.Content); i += 2 {
			keys = append(keys, n.Content[i].Value)
			if n.Content[i].Value == key {
				next = n.Content[i+1]
			}
		}
		if next == nil {
			if at == "" {
				return nil, fmt.Errorf("unknown field %s: not %s, nor a scenario key (%s)", path, Gain, strings.Join(keys, ", "))
			}
			return nil, fmt.Errorf("unknown field %s: %s has %s", path, at, strings.Join(keys, ", "))
		}
		at = strings.TrimPrefix(at+"."+key, ".")
		n = next
		if hasIdx {
			i, err := strconv.Atoi(strings.TrimSuffix(idx, "]"))
			if err != nil || !strings.HasSuffix(idx, "]") || n.Kind != yaml.SequenceNode {
				return nil, fmt.Errorf("unknown field %s: %s is not a list to index", path, at)
			}
			if i < 0 || i >= len(n.Content) {
				return nil, fmt.Errorf("unknown field %s: %s has %d entries", path, at, len(n.Content))
			}
			at = fmt.Sprintf("%s[%d]", at, i)
			n = n.Content[i]
		}
	}
	if n.Kind != yaml.ScalarNode {
		return nil, fmt.Errorf("field %s is not a single value: name one of its keys", path)
	}
	return n, nil
}

var lineNumber = regexp.MustCompile(` line [0-9]+:`)

// Describe writes settings as field=value pairs.
func Describe(s []Setting) string {
	parts := make([]string, len(s))
	for i, x := range s {
		parts[i] = fmt.Sprintf("%s=%v", x.Field, x.Value)
	}
	return strings.Join(parts, " ")
}
