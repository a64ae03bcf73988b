package dashboards

import (
	_ "embed"
	"fmt"

	"go.yaml.in/yaml/v3"
)

// RulesYAML is rules/stillsky-rules.yaml, the recording and alert rules that
// deploy/prometheus/prometheus.yml loads.
//
//go:embed rules/stillsky-rules.yaml
var RulesYAML []byte

// Rule is one recording or alert rule of RulesYAML.
type Rule struct {
	Group string
	// Record is the recorded series name; empty for an alert.
	Record string
	// Alert is the alert name; empty for a recording rule.
	Alert       string
	Expr        string
	For         string
	Labels      map[string]string
	Annotations map[string]string
}

// Rules parses RulesYAML.
func Rules() ([]Rule, error) {
	var file struct {
		Groups []struct {
			Name  string `yaml:"name"`
			Rules []struct {
				Record      string            `yaml:"record"`
				Alert       string            `yaml:"alert"`
				Expr        string            `yaml:"expr"`
				For         string            `yaml:"for"`
				Labels      map[string]string `yaml:"labels"`
				Annotations map[string]string `yaml:"annotations"`
			} `yaml:"rules"`
		} `yaml:"groups"`
	}
	if err := yaml.Unmarshal(RulesYAML, &file); err != nil {
		return nil, fmt.Errorf("dashboards: rules: %w", err)
	}
	var out []Rule
	for _, g := range file.Groups {
		for _, r := range g.Rules {
			out = append(out, Rule{Group: g.Name, Record: r.Record, Alert: r.Alert, Expr: r.Expr, For: r.For, Labels: r.Labels, Annotations: r.Annotations})
		}
	}
	return out, nil
}
