package deploy

import (
	"bufio"
	"bytes"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"slices"
	"strings"
	"testing"

	"go.yaml.in/yaml/v3"

	"stillsky/internal/testtool"
)

// TestPrometheusConfigs runs `promtool check config`, which parses the
// configuration with Prometheus's own loader and checks the rule files it names.
func TestPrometheusConfigs(t *testing.T) {
	promtool := testtool.Require(t, "promtool", "prometheus")
	for _, path := range []string{"prometheus/prometheus.yml", "prometheus/kubernetes.yml"} {
		out, err := exec.Command(promtool, "check", "config", path).CombinedOutput()
		if err != nil {
			t.Errorf("promtool check config %s: %v\n%s", path, err, out)
		}
	}
}

type promConfig struct {
	RuleFiles     []string `yaml:"rule_files"`
	ScrapeConfigs []struct {
		JobName       string `yaml:"job_name"`
		StaticConfigs []struct {
			Targets []string `yaml:"targets"`
		} `yaml:"static_configs"`
	} `yaml:"scrape_configs"`
}

func readYAML(t *testing.T, path string, v any) {
	t.Helper()
	data, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	dec := yaml.NewDecoder(bytes.NewReader(data))
	dec.KnownFields(false)
	if err := dec.Decode(v); err != nil {
		t.Fatalf("%s: %v", path, err)
	}
}

// TestPrometheusConfigReferences checks, apart from promtool, that the rule files
// resolve (Prometheus reads them relative to the configuration file) to the
// repository's rules, and that the jobs and targets are those of the metrics
// contract: job stillsky-sim on port 7403, stillsky-loop on 7412.
func TestPrometheusConfigReferences(t *testing.T) {
	rules, err := filepath.Abs(filepath.Join(root, "dashboards", "rules", "stillsky-rules.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	for _, path := range []string{"prometheus/prometheus.yml", "prometheus/kubernetes.yml"} {
		var c promConfig
		readYAML(t, path, &c)
		found := false
		for _, rf := range c.RuleFiles {
			abs, err := filepath.Abs(filepath.Join(filepath.Dir(path), rf))
			if err != nil {
				t.Fatal(err)
			}
			if _, err := os.Stat(abs); err != nil {
				t.Errorf("%s: rule file %s: %v", path, rf, err)
			}
			found = found || abs == rules
		}
		if !found {
			t.Errorf("%s: rule_files %v do not load dashboards/rules/stillsky-rules.yaml", path, c.RuleFiles)
		}
		ports := map[string]string{}
		for _, sc := range c.ScrapeConfigs {
			for _, st := range sc.StaticConfigs {
				for _, target := range st.Targets {
					ports[sc.JobName] = target[strings.LastIndex(target, ":")+1:]
				}
			}
		}
		if ports["stillsky-sim"] != "7403" || ports["stillsky-loop"] != "7412" {
			t.Errorf("%s: job ports %v: want stillsky-sim 7403 and stillsky-loop 7412", path, ports)
		}
	}
}

// TestGrafanaProvisioning checks the provisioning files in the form of the Grafana
// documentation ("Provision Grafana": apiVersion 1, datasources, providers) and
// that the dashboard provider's folder, with STILLSKY_REPO set to this checkout,
// holds the repository's dashboards.
func TestGrafanaProvisioning(t *testing.T) {
	var ds struct {
		APIVersion  int `yaml:"apiVersion"`
		Datasources []struct {
			Name, Type, URL, Access, UID string
		} `yaml:"datasources"`
	}
	readYAML(t, "grafana/provisioning/datasources/stillsky.yaml", &ds)
	if ds.APIVersion != 1 || len(ds.Datasources) != 1 {
		t.Fatalf("datasources: apiVersion %d, %d entries: want 1 and 1", ds.APIVersion, len(ds.Datasources))
	}
	if d := ds.Datasources[0]; d.Type != "prometheus" || d.URL != "http://127.0.0.1:9090" || d.Access != "proxy" {
		t.Errorf("datasource %+v: want a proxied prometheus at http://127.0.0.1:9090", d)
	}

	var dp struct {
		APIVersion int `yaml:"apiVersion"`
		Providers  []struct {
			Name    string `yaml:"name"`
			Type    string `yaml:"type"`
			Options struct {
				Path string `yaml:"path"`
			} `yaml:"options"`
		} `yaml:"providers"`
	}
	readYAML(t, "grafana/provisioning/dashboards/stillsky.yaml", &dp)
	if dp.APIVersion != 1 || len(dp.Providers) != 1 || dp.Providers[0].Type != "file" {
		t.Fatalf("dashboard providers %+v: want one file provider", dp)
	}
	repo, err := filepath.Abs(root)
	if err != nil {
		t.Fatal(err)
	}
	dir := os.Expand(dp.Providers[0].Options.Path, func(name string) string {
		if name == "STILLSKY_REPO" {
			return repo
		}
		t.Errorf("provider path uses ${%s}; only STILLSKY_REPO is documented", name)
		return ""
	})
	got, err := filepath.Glob(filepath.Join(dir, "*.json"))
	if err != nil {
		t.Fatal(err)
	}
	want, err := filepath.Glob(filepath.Join(root, "dashboards", "grafana", "*.json"))
	if err != nil {
		t.Fatal(err)
	}
	if len(got) == 0 || len(got) != len(want) {
		t.Errorf("provider path %s holds %d dashboards; dashboards/grafana holds %d", dir, len(got), len(want))
	}
}

// TestContainerfileBuildsTheBinary checks that the package the image builds and
// the entry point the manifests run exist in the repository.
func TestContainerfileBuildsTheBinary(t *testing.T) {
	data, err := os.ReadFile("Containerfile")
	if err != nil {
		t.Fatal(err)
	}
	m := regexp.MustCompile(`go build .* (\./\S+)`).FindSubmatch(data)
	if m == nil {
		t.Fatal("Containerfile: no go build line")
	}
	if fi, err := os.Stat(filepath.Join(root, string(m[1]))); err != nil || !fi.IsDir() {
		t.Errorf("Containerfile builds %s: %v", m[1], err)
	}
	if !bytes.Contains(data, []byte(`ENTRYPOINT ["/usr/local/bin/stillsky"]`)) {
		t.Error("Containerfile: the entry point must be /usr/local/bin/stillsky, as in the systemd units")
	}
}

// unit is a parsed systemd unit: directive → values in file order.
type unit map[string][]string

func readUnit(t *testing.T, path string) unit {
	t.Helper()
	f, err := os.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	u := unit{}
	sc := bufio.NewScanner(f)
	for sc.Scan() {
		line := strings.TrimSpace(sc.Text())
		if line == "" || strings.HasPrefix(line, "#") || strings.HasPrefix(line, "[") {
			continue
		}
		k, v, ok := strings.Cut(line, "=")
		if !ok {
			t.Errorf("%s: %q is not key=value", path, line)
			continue
		}
		u[k] = append(u[k], v)
	}
	if err := sc.Err(); err != nil {
		t.Fatal(err)
	}
	return u
}

func (u unit) env() map[string]string {
	out := map[string]string{}
	for _, e := range u["Environment"] {
		k, v, _ := strings.Cut(e, "=")
		out[k] = v
	}
	return out
}

var units = []string{"systemd/stillsky-sim.service", "systemd/stillsky-loop.service"}

// TestSystemdUnitSettings checks the settings the units exist for: real-time
// scheduling, CPU pinning, memory locking and the two capabilities (systemd.exec
// and capabilities(7) for their meaning), listeners on loopback, and every
// variable ExecStart uses defined in the unit or by systemd itself.
func TestSystemdUnitSettings(t *testing.T) {
	var example map[string]string
	for _, path := range units {
		u := readUnit(t, path)
		for key, want := range map[string]string{
			"CPUSchedulingPolicy": "fifo",
			"LimitMEMLOCK":        "infinity",
			"AmbientCapabilities": "CAP_SYS_NICE CAP_IPC_LOCK",
			"NoNewPrivileges":     "yes",
			"DynamicUser":         "yes",
		} {
			if !slices.Equal(u[key], []string{want}) {
				t.Errorf("%s: %s=%v, want %s", path, key, u[key], want)
			}
		}
		for _, key := range []string{"CPUAffinity", "CPUSchedulingPriority", "ExecStart", "ProtectSystem"} {
			if len(u[key]) != 1 {
				t.Errorf("%s: %s set %d times, want once", path, key, len(u[key]))
			}
		}
		if _, ok := u["RestrictRealtime"]; ok {
			t.Errorf("%s: RestrictRealtime= forbids the FIFO scheduling the unit asks for", path)
		}
		env := u.env()
		for _, name := range regexp.MustCompile(`\$\{(\w+)\}`).FindAllStringSubmatch(u["ExecStart"][0], -1) {
			if _, ok := env[name[1]]; !ok && name[1] != "STATE_DIRECTORY" {
				t.Errorf("%s: ExecStart uses ${%s}, which has no default", path, name[1])
			}
		}
		for k, v := range env {
			if strings.Contains(k, "METRICS") || k == "STILLSKY_LISTEN" {
				if !strings.HasPrefix(v, "127.0.0.1:") {
					t.Errorf("%s: %s=%s: listen on loopback", path, k, v)
				}
			}
			if example == nil {
				example = readEnvFile(t, "systemd/stillsky.env.example")
			}
			if ev, ok := example[k]; ok && ev != v {
				t.Errorf("%s: %s=%s but stillsky.env.example says %s", path, k, v, ev)
			}
		}
	}
}

func readEnvFile(t *testing.T, path string) map[string]string {
	t.Helper()
	data, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	out := map[string]string{}
	for _, line := range strings.Split(string(data), "\n") {
		line = strings.TrimSpace(line)
		if line == "" || strings.HasPrefix(line, "#") {
			continue
		}
		k, v, ok := strings.Cut(line, "=")
		if !ok {
			t.Errorf("%s: %q is not NAME=value", path, line)
		}
		out[k] = v
	}
	if len(out) == 0 {
		t.Errorf("%s: no settings", path)
	}
	return out
}

// TestSystemdVerify runs `systemd-analyze verify`, systemd's own check of unit
// files. verify also requires the ExecStart binary to exist, and
// /usr/local/bin/stillsky is not installed on a build machine, so the units are
// copied to a temporary folder with that one path replaced by an executable that
// exists (this test binary); every other line is checked as written. verify
// reports unknown keys and bad values as warnings with exit status 0, so any
// output fails the test.
func TestSystemdVerify(t *testing.T) {
	analyze := testtool.Require(t, "systemd-analyze", "systemd")
	self, err := os.Executable()
	if err != nil {
		t.Fatal(err)
	}
	dir := t.TempDir()
	var names []string
	for _, path := range units {
		data, err := os.ReadFile(path)
		if err != nil {
			t.Fatal(err)
		}
		if !bytes.Contains(data, []byte("ExecStart=/usr/local/bin/stillsky ")) {
			t.Fatalf("%s: ExecStart does not run /usr/local/bin/stillsky", path)
		}
		data = bytes.ReplaceAll(data, []byte("ExecStart=/usr/local/bin/stillsky "), []byte("ExecStart="+self+" "))
		name := filepath.Base(path)
		if err := os.WriteFile(filepath.Join(dir, name), data, 0o644); err != nil {
			t.Fatal(err)
		}
		names = append(names, name)
	}
	cmd := exec.Command(analyze, append([]string{"verify", "--man=no"}, names...)...)
	cmd.Dir = dir
	out, err := cmd.CombinedOutput()
	if err != nil || len(bytes.TrimSpace(out)) > 0 {
		t.Errorf("systemd-analyze verify: %v\n%s", err, out)
	}
}
