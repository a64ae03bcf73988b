package daemon

import (
	"strings"
	"testing"

	"stillsky/dashboards"
)

// The dashboards and rules are written against dashboards.KnownMetrics; this keeps
// that list and the daemon's registry identical, in names and types.
func TestMetricsMatchDashboardContract(t *testing.T) {
	m := newMetrics()
	fams, err := m.reg.Gather()
	if err != nil {
		t.Fatal(err)
	}
	exported := map[string]string{}
	for _, f := range fams {
		exported[f.GetName()] = strings.ToLower(f.GetType().String())
	}
	want := map[string]string{}
	for _, k := range dashboards.KnownMetrics {
		if k.Exporter == "loop" {
			want[k.Name] = k.Type
		}
	}
	for name, typ := range want {
		got, ok := exported[name]
		switch {
		case !ok:
			t.Errorf("%s is in dashboards.KnownMetrics but the daemon does not export it", name)
		case got != typ:
			t.Errorf("%s: the daemon exports a %s, dashboards.KnownMetrics says %s", name, got, typ)
		}
	}
	for name := range exported {
		if _, ok := want[name]; !ok {
			t.Errorf("the daemon exports %s, missing from dashboards.KnownMetrics", name)
		}
	}
}
