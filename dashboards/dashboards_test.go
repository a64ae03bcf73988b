package dashboards

import (
	"bytes"
	"encoding/json"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"

	"github.com/prometheus/prometheus/model/labels"
	"github.com/prometheus/prometheus/promql/parser"
)

// TestCommittedJSONIsCurrent fails when grafana/*.json differs from what Build
// makes now: run `go generate ./dashboards` and commit.
func TestCommittedJSONIsCurrent(t *testing.T) {
	files, err := Build()
	if err != nil {
		t.Fatal(err)
	}
	want := map[string]bool{}
	for _, f := range files {
		want[f.Name] = true
		built, err := f.JSON()
		if err != nil {
			t.Fatal(err)
		}
		committed, err := os.ReadFile(filepath.Join("grafana", f.Name))
		if err != nil {
			t.Fatalf("%v (run go generate ./dashboards)", err)
		}
		if !bytes.Equal(built, committed) {
			t.Errorf("grafana/%s is stale: run go generate ./dashboards", f.Name)
		}
	}
	for _, name := range committedNames(t) {
		if !want[name] {
			t.Errorf("grafana/%s is not built by Build: remove it or add it to Build", name)
		}
	}
}

func committedNames(t *testing.T) []string {
	t.Helper()
	paths, err := filepath.Glob(filepath.Join("grafana", "*.json"))
	if err != nil {
		t.Fatal(err)
	}
	if len(paths) == 0 {
		t.Fatal("no dashboards in grafana/")
	}
	names := make([]string, len(paths))
	for i, p := range paths {
		names[i] = filepath.Base(p)
	}
	return names
}

// The shape checked here is the dashboard JSON model of the Grafana
// documentation ("JSON model": uid, title, schemaVersion, panels with datasource
// and targets, templating.list); the committed files are read as plain JSON, not
// through the SDK that wrote them.
type panelJSON struct {
	Type       string `json:"type"`
	Title      string `json:"title"`
	Datasource *struct {
		Type string `json:"type"`
		UID  string `json:"uid"`
	} `json:"datasource"`
	Targets []struct {
		RefID      string `json:"refId"`
		Expr       string `json:"expr"`
		Datasource *struct {
			Type string `json:"type"`
			UID  string `json:"uid"`
		} `json:"datasource"`
	} `json:"targets"`
	GridPos *struct{ H, W, X, Y int } `json:"gridPos"`
}

type dashboardJSON struct {
	UID           string      `json:"uid"`
	Title         string      `json:"title"`
	SchemaVersion int         `json:"schemaVersion"`
	Panels        []panelJSON `json:"panels"`
	Templating    struct {
		List []struct {
			Name  string `json:"name"`
			Type  string `json:"type"`
			Query any    `json:"query"`
		} `json:"list"`
	} `json:"templating"`
}

func loadCommitted(t *testing.T) map[string]dashboardJSON {
	t.Helper()
	out := map[string]dashboardJSON{}
	for _, name := range committedNames(t) {
		data, err := os.ReadFile(filepath.Join("grafana", name))
		if err != nil {
			t.Fatal(err)
		}
		var d dashboardJSON
		dec := json.NewDecoder(bytes.NewReader(data))
		if err := dec.Decode(&d); err != nil {
			t.Fatalf("grafana/%s: %v", name, err)
		}
		out[name] = d
	}
	return out
}

func TestDashboardStructure(t *testing.T) {
	uids := map[string]string{}
	for name, d := range loadCommitted(t) {
		t.Run(name, func(t *testing.T) {
			if d.UID == "" || d.Title == "" {
				t.Errorf("uid %q title %q: both must be set", d.UID, d.Title)
			}
			if other, dup := uids[d.UID]; dup {
				t.Errorf("uid %q also used by %s", d.UID, other)
			}
			uids[d.UID] = name
			// Grafana 11 and 12 write schemaVersion 39 and above; older numbers
			// trigger migrations on import (Grafana documentation, JSON model).
			if d.SchemaVersion < 39 {
				t.Errorf("schemaVersion %d: want >= 39", d.SchemaVersion)
			}
			vars := map[string]string{}
			for _, v := range d.Templating.List {
				vars[v.Name] = v.Type
			}
			for name, typ := range map[string]string{"datasource": "datasource", "job": "query", "instance": "query"} {
				if vars[name] != typ {
					t.Errorf("template variable %q: type %q, want %q", name, vars[name], typ)
				}
			}
			if len(d.Panels) == 0 {
				t.Fatal("no panels")
			}
			ids := map[string]bool{}
			for _, p := range d.Panels {
				if p.Type == "row" {
					continue
				}
				if p.Title == "" || ids[p.Title] {
					t.Errorf("a %s panel has an empty or repeated title %q", p.Type, p.Title)
				}
				ids[p.Title] = true
				if p.Datasource == nil || p.Datasource.Type != "prometheus" || p.Datasource.UID == "" {
					t.Errorf("panel %q: datasource %+v: want a prometheus datasource", p.Title, p.Datasource)
				}
				if p.GridPos == nil || p.GridPos.W <= 0 || p.GridPos.H <= 0 || p.GridPos.X+p.GridPos.W > 24 {
					t.Errorf("panel %q: gridPos %+v: want a place on the 24-column grid", p.Title, p.GridPos)
				}
				if len(p.Targets) == 0 {
					t.Errorf("panel %q: no targets", p.Title)
				}
				for _, tg := range p.Targets {
					if tg.Expr == "" || tg.RefID == "" || tg.Datasource == nil || tg.Datasource.Type != "prometheus" {
						t.Errorf("panel %q: target %+v: want expr, refId and a prometheus datasource", p.Title, tg)
					}
					key := p.Title + "/" + tg.RefID
					if ids[key] {
						t.Errorf("panel %q: refId %s used twice", p.Title, tg.RefID)
					}
					ids[key] = true
				}
			}
		})
	}
}

// Markers stand in for the template variables so that a parsed selector shows
// whether the variable reached it.
const (
	jobMarker      = "JOBVAR"
	instanceMarker = "INSTANCEVAR"
)

func withMarkers(expr string) string {
	return strings.NewReplacer("$__rate_interval", "1m", "$job", jobMarker, "$instance", instanceMarker).Replace(expr)
}

// checkExpr parses expr with the PromQL parser of Prometheus itself and checks
// that each selector names a metric in KnownMetrics (or in allowed) and, when
// filtered is set, carries the job and instance variables.
func checkExpr(t *testing.T, where, expr string, allowed map[string]bool, filtered bool) {
	t.Helper()
	known := SeriesNames()
	e, err := parser.NewParser(parser.Options{}).ParseExpr(withMarkers(expr))
	if err != nil {
		t.Errorf("%s: %q does not parse: %v", where, expr, err)
		return
	}
	selectors := 0
	parser.Inspect(e, func(n parser.Node, _ []parser.Node) error {
		vs, ok := n.(*parser.VectorSelector)
		if !ok {
			return nil
		}
		selectors++
		if !slices.Contains(known, vs.Name) && !allowed[vs.Name] {
			t.Errorf("%s: metric %q is not in KnownMetrics (expr %q)", where, vs.Name, expr)
		}
		if !filtered {
			return nil
		}
		for label, marker := range map[string]string{"job": jobMarker, "instance": instanceMarker} {
			if !hasMatcher(vs.LabelMatchers, label, marker) {
				t.Errorf("%s: selector %s does not filter %s=~\"$%s\"", where, vs, label, label)
			}
		}
		return nil
	})
	if selectors == 0 {
		t.Errorf("%s: %q selects no metric", where, expr)
	}
}

func hasMatcher(ms []*labels.Matcher, name, value string) bool {
	for _, m := range ms {
		if m.Name == name && m.Type == labels.MatchRegexp && m.Value == value {
			return true
		}
	}
	return false
}

func TestPanelQueriesUseKnownMetricsAndVariables(t *testing.T) {
	n := 0
	for name, d := range loadCommitted(t) {
		for _, p := range d.Panels {
			for _, tg := range p.Targets {
				checkExpr(t, name+": "+p.Title+"/"+tg.RefID, tg.Expr, nil, true)
				n++
			}
		}
		for _, v := range d.Templating.List {
			if q, ok := v.Query.(string); ok && v.Type == "query" {
				// label_values(selector, label) is Grafana's, not PromQL: check its selector.
				inner := strings.TrimSuffix(strings.TrimPrefix(q, "label_values("), ")")
				sel := inner[:strings.LastIndex(inner, ",")]
				checkExpr(t, name+": variable "+v.Name, sel, nil, false)
			}
		}
	}
	if n < 40 {
		t.Errorf("checked %d panel queries; the dashboards have more", n)
	}
}

// TestQueriesMatchCommitted ties Queries (what the integration test will send to
// Prometheus) to the committed files.
func TestQueriesMatchCommitted(t *testing.T) {
	files, err := Build()
	if err != nil {
		t.Fatal(err)
	}
	var fromFiles []string
	for _, d := range loadCommitted(t) {
		for _, p := range d.Panels {
			for _, tg := range p.Targets {
				fromFiles = append(fromFiles, tg.Expr)
			}
		}
	}
	var built []string
	for _, q := range Queries(files) {
		built = append(built, q.Expr)
	}
	slices.Sort(fromFiles)
	slices.Sort(built)
	if !slices.Equal(fromFiles, built) {
		t.Errorf("Queries returns %d expressions, the committed dashboards hold %d", len(built), len(fromFiles))
	}
}

func TestInterpolateParses(t *testing.T) {
	files, err := Build()
	if err != nil {
		t.Fatal(err)
	}
	for _, q := range Queries(files) {
		expr := Interpolate(q.Expr, "1m")
		if strings.Contains(expr, "$") {
			t.Errorf("%s/%s: %q still holds a variable", q.Dashboard, q.Panel, expr)
		}
		if _, err := parser.NewParser(parser.Options{}).ParseExpr(expr); err != nil {
			t.Errorf("%s/%s: %q: %v", q.Dashboard, q.Panel, expr, err)
		}
	}
}

// TestLatencyPanelsUseTheFramePeriod checks what the latency dashboard is for:
// each quantile panel draws p50, p99 and p99.9 beside the frame period.
func TestLatencyPanelsUseTheFramePeriod(t *testing.T) {
	d := loadCommitted(t)["latency.json"]
	quantilePanels := 0
	for _, p := range d.Panels {
		var exprs []string
		for _, tg := range p.Targets {
			exprs = append(exprs, tg.Expr)
		}
		all := strings.Join(exprs, "\n")
		if p.Type != "timeseries" {
			continue
		}
		quantilePanels++
		for _, want := range []string{"histogram_quantile(0.5,", "histogram_quantile(0.99,", "histogram_quantile(0.999,", "stillsky_frame_period_seconds{"} {
			if !strings.Contains(all, want) {
				t.Errorf("panel %q: no %q", p.Title, want)
			}
		}
	}
	if quantilePanels != 3 {
		t.Errorf("%d quantile panels, want 3 (compute, rtc, end-to-end)", quantilePanels)
	}
}
