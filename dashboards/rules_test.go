package dashboards

import (
	"os"
	"os/exec"
	"regexp"
	"slices"
	"testing"

	"go.yaml.in/yaml/v3"

	"stillsky/internal/testtool"
)

// TestRulesWithPromtool checks the rule file with Prometheus's own tool:
// `promtool check rules` (syntax, PromQL, templates) and `promtool test rules`
// (the unit tests in rules/stillsky-rules_test.yaml: each alert firing and not).
func TestRulesWithPromtool(t *testing.T) {
	promtool := testtool.Require(t, "promtool", "prometheus")
	for _, args := range [][]string{
		{"check", "rules", "stillsky-rules.yaml"},
		{"test", "rules", "stillsky-rules_test.yaml"},
	} {
		cmd := exec.Command(promtool, args...)
		cmd.Dir = "rules"
		out, err := cmd.CombinedOutput()
		if err != nil {
			t.Errorf("promtool %v: %v\n%s", args, err, out)
		}
	}
}

// recordName is the level:metric:operations form of recorded series (Prometheus
// documentation, "Recording rules", naming).
var recordName = regexp.MustCompile(`^[a-z_]+:stillsky_[a-z0-9_]+:[a-z0-9_]+$`)

// TestRulesUseKnownMetrics is the dashboards-to-rules consistency check: every
// rule expression parses with the PromQL parser and selects only metrics of the
// contract, series recorded in the same file, or Prometheus's own up.
func TestRulesUseKnownMetrics(t *testing.T) {
	rules, err := Rules()
	if err != nil {
		t.Fatal(err)
	}
	allowed := map[string]bool{"up": true}
	for _, r := range rules {
		if r.Record != "" {
			allowed[r.Record] = true
			if !recordName.MatchString(r.Record) {
				t.Errorf("record %q: want level:stillsky_metric:operations", r.Record)
			}
		}
	}
	alerts := 0
	for _, r := range rules {
		name := r.Record + r.Alert
		checkExpr(t, r.Group+"/"+name, r.Expr, allowed, false)
		if r.Alert == "" {
			continue
		}
		alerts++
		if sev := r.Labels["severity"]; sev != "critical" && sev != "warning" {
			t.Errorf("alert %s: severity %q: want critical or warning", r.Alert, sev)
		}
		if r.Annotations["summary"] == "" || r.Annotations["description"] == "" {
			t.Errorf("alert %s: needs a summary and a description", r.Alert)
		}
	}
	if alerts < 8 {
		t.Errorf("%d alerts; the rule file should hold at least 8", alerts)
	}
}

// TestEveryAlertIsUnitTested checks that the promtool unit tests cover each alert
// both firing (some expected alerts) and quiet (none expected).
func TestEveryAlertIsUnitTested(t *testing.T) {
	data, err := os.ReadFile("rules/stillsky-rules_test.yaml")
	if err != nil {
		t.Fatal(err)
	}
	var file struct {
		RuleFiles []string `yaml:"rule_files"`
		Tests     []struct {
			AlertRuleTest []struct {
				AlertName string `yaml:"alertname"`
				ExpAlerts []any  `yaml:"exp_alerts"`
			} `yaml:"alert_rule_test"`
		} `yaml:"tests"`
	}
	if err := yaml.Unmarshal(data, &file); err != nil {
		t.Fatal(err)
	}
	if !slices.Equal(file.RuleFiles, []string{"stillsky-rules.yaml"}) {
		t.Errorf("rule_files %v: want the one rule file", file.RuleFiles)
	}
	fires, quiet := map[string]bool{}, map[string]bool{}
	for _, tc := range file.Tests {
		for _, a := range tc.AlertRuleTest {
			if len(a.ExpAlerts) > 0 {
				fires[a.AlertName] = true
			} else {
				quiet[a.AlertName] = true
			}
		}
	}
	rules, err := Rules()
	if err != nil {
		t.Fatal(err)
	}
	for _, r := range rules {
		if r.Alert == "" {
			continue
		}
		if !fires[r.Alert] {
			t.Errorf("alert %s: no unit test where it fires", r.Alert)
		}
		if !quiet[r.Alert] {
			t.Errorf("alert %s: no unit test where it stays quiet", r.Alert)
		}
	}
}
