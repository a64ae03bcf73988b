package promtest

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"net"
	"net/http"
	"net/url"
	"os"
	"os/exec"
	"path/filepath"
	"slices"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/prometheus/common/model"
	"go.yaml.in/yaml/v3"

	"stillsky/internal/testtool"
)

// Interval is the scrape and rule evaluation interval of the server.
const Interval = time.Second

// startTimeout bounds how long Prometheus may take to become ready.
const startTimeout = 60 * time.Second

// Server is a running Prometheus.
type Server struct {
	// URL is the server's base URL, e.g. http://127.0.0.1:41234.
	URL string
	// Dir holds the configuration, the storage and the server's log.
	Dir string

	t      testing.TB
	client *http.Client
	cmd    *exec.Cmd
	done   chan struct{}
	logf   *os.File

	mu      sync.Mutex
	waitErr error
}

// Start starts Prometheus scraping targets (job name → host:port, path /metrics)
// and loading ruleFiles, waits until it reports ready, and stops it when the test
// ends. It skips the test (fails it under CI=true) when prometheus is not
// installed (Debian package prometheus).
func Start(t testing.TB, targets map[string]string, ruleFiles []string) *Server {
	t.Helper()
	bin := testtool.Require(t, "prometheus", "prometheus")
	dir := t.TempDir()
	config, err := writeConfig(dir, targets, ruleFiles)
	if err != nil {
		t.Fatal(err)
	}
	// A free port found by listening and closing can be taken before Prometheus
	// binds it; a few tries make that race harmless.
	var lastErr error
	for try := range 3 {
		s, err := start(t, bin, dir, config, try)
		if err == nil {
			return s
		}
		lastErr = err
	}
	t.Fatalf("promtest: %v", lastErr)
	return nil
}

// scrapeConfig and the types below are the parts of the Prometheus
// configuration file format (Prometheus documentation, "Configuration") that
// Start writes.
type scrapeConfig struct {
	JobName        string         `yaml:"job_name"`
	ScrapeInterval string         `yaml:"scrape_interval"`
	ScrapeTimeout  string         `yaml:"scrape_timeout"`
	StaticConfigs  []staticConfig `yaml:"static_configs"`
}

type staticConfig struct {
	Targets []string `yaml:"targets"`
}

type config struct {
	Global struct {
		ScrapeInterval     string `yaml:"scrape_interval"`
		ScrapeTimeout      string `yaml:"scrape_timeout"`
		EvaluationInterval string `yaml:"evaluation_interval"`
	} `yaml:"global"`
	RuleFiles     []string       `yaml:"rule_files,omitempty"`
	ScrapeConfigs []scrapeConfig `yaml:"scrape_configs"`
}

func writeConfig(dir string, targets map[string]string, ruleFiles []string) (string, error) {
	var c config
	iv := Interval.String()
	c.Global.ScrapeInterval, c.Global.ScrapeTimeout, c.Global.EvaluationInterval = iv, iv, iv
	for _, rf := range ruleFiles {
		abs, err := filepath.Abs(rf)
		if err != nil {
			return "", fmt.Errorf("promtest: rule file %s: %w", rf, err)
		}
		if _, err := os.Stat(abs); err != nil {
			return "", fmt.Errorf("promtest: rule file %s: %w", rf, err)
		}
		c.RuleFiles = append(c.RuleFiles, abs)
	}
	jobs := make([]string, 0, len(targets))
	for job := range targets {
		jobs = append(jobs, job)
	}
	slices.Sort(jobs)
	for _, job := range jobs {
		if _, _, err := net.SplitHostPort(targets[job]); err != nil {
			return "", fmt.Errorf("promtest: target %s %q: %w", job, targets[job], err)
		}
		c.ScrapeConfigs = append(c.ScrapeConfigs, scrapeConfig{
			JobName: job, ScrapeInterval: iv, ScrapeTimeout: iv,
			StaticConfigs: []staticConfig{{Targets: []string{targets[job]}}},
		})
	}
	data, err := yaml.Marshal(&c)
	if err != nil {
		return "", fmt.Errorf("promtest: config: %w", err)
	}
	path := filepath.Join(dir, "prometheus.yml")
	if err := os.WriteFile(path, data, 0o644); err != nil {
		return "", fmt.Errorf("promtest: %w", err)
	}
	return path, nil
}

func freePort() (string, error) {
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		return "", err
	}
	addr := l.Addr().String()
	return addr, l.Close()
}

func start(t testing.TB, bin, dir, config string, try int) (*Server, error) {
	addr, err := freePort()
	if err != nil {
		return nil, err
	}
	logf, err := os.Create(filepath.Join(dir, fmt.Sprintf("prometheus-%d.log", try)))
	if err != nil {
		return nil, err
	}
	cmd := exec.Command(bin,
		"--config.file="+config,
		"--storage.tsdb.path="+filepath.Join(dir, fmt.Sprintf("data-%d", try)),
		"--web.listen-address="+addr,
		"--log.level=warn",
	)
	cmd.Stdout, cmd.Stderr = logf, logf
	if err := cmd.Start(); err != nil {
		logf.Close()
		return nil, fmt.Errorf("start %s: %w", bin, err)
	}
	s := &Server{
		URL: "http://" + addr, Dir: dir, t: t, cmd: cmd, logf: logf,
		client: &http.Client{Timeout: 10 * time.Second},
		done:   make(chan struct{}),
	}
	go func() {
		err := cmd.Wait()
		s.mu.Lock()
		s.waitErr = err
		s.mu.Unlock()
		close(s.done)
	}()
	if err := s.waitReady(); err != nil {
		s.stop()
		return nil, fmt.Errorf("%w\n%s", err, s.Log())
	}
	t.Cleanup(func() {
		if t.Failed() {
			t.Logf("prometheus log:\n%s", s.Log())
		}
		s.stop()
	})
	return s, nil
}

func (s *Server) waitReady() error {
	deadline := time.Now().Add(startTimeout)
	for time.Now().Before(deadline) {
		select {
		case <-s.done:
			s.mu.Lock()
			defer s.mu.Unlock()
			return fmt.Errorf("prometheus exited before it was ready: %v", s.waitErr)
		default:
		}
		resp, err := s.client.Get(s.URL + "/-/ready")
		if err == nil {
			resp.Body.Close()
			if resp.StatusCode == http.StatusOK {
				return nil
			}
		}
		time.Sleep(50 * time.Millisecond)
	}
	return fmt.Errorf("prometheus at %s not ready after %v", s.URL, startTimeout)
}

// stop asks Prometheus to shut down cleanly and kills it if it does not within
// ten seconds.
func (s *Server) stop() {
	select {
	case <-s.done:
	default:
		_ = s.cmd.Process.Signal(os.Interrupt)
		select {
		case <-s.done:
		case <-time.After(10 * time.Second):
			_ = s.cmd.Process.Kill()
			<-s.done
		}
	}
	s.logf.Close()
}

// Log returns what Prometheus has written to its log so far.
func (s *Server) Log() string {
	data, err := os.ReadFile(s.logf.Name())
	if err != nil {
		return err.Error()
	}
	return string(data)
}

// apiResponse is the envelope of every /api/v1 answer (Prometheus documentation,
// "HTTP API": status, data, errorType, error).
type apiResponse struct {
	Status    string          `json:"status"`
	Data      json.RawMessage `json:"data"`
	ErrorType string          `json:"errorType"`
	Error     string          `json:"error"`
}

func (s *Server) get(path string, params url.Values, into any) error {
	u := s.URL + path
	if len(params) > 0 {
		u += "?" + params.Encode()
	}
	resp, err := s.client.Get(u)
	if err != nil {
		return fmt.Errorf("promtest: %s: %w", path, err)
	}
	defer resp.Body.Close()
	body, err := io.ReadAll(resp.Body)
	if err != nil {
		return fmt.Errorf("promtest: %s: %w", path, err)
	}
	var r apiResponse
	if err := json.Unmarshal(body, &r); err != nil {
		return fmt.Errorf("promtest: %s: status %s: %w: %.200s", path, resp.Status, err, body)
	}
	if r.Status != "success" {
		return fmt.Errorf("promtest: %s: %s: %s", path, r.ErrorType, r.Error)
	}
	if err := json.Unmarshal(r.Data, into); err != nil {
		return fmt.Errorf("promtest: %s: data: %w", path, err)
	}
	return nil
}

// Query evaluates expr at the current time (/api/v1/query). A scalar result comes
// back as one sample with no labels; a range vector or string result is an error.
func (s *Server) Query(expr string) (model.Vector, error) {
	var data struct {
		ResultType string          `json:"resultType"`
		Result     json.RawMessage `json:"result"`
	}
	if err := s.get("/api/v1/query", url.Values{"query": {expr}}, &data); err != nil {
		return nil, err
	}
	switch data.ResultType {
	case "vector":
		var v model.Vector
		if err := json.Unmarshal(data.Result, &v); err != nil {
			return nil, fmt.Errorf("promtest: query %q: %w", expr, err)
		}
		return v, nil
	case "scalar":
		var sc model.Scalar
		if err := json.Unmarshal(data.Result, &sc); err != nil {
			return nil, fmt.Errorf("promtest: query %q: %w", expr, err)
		}
		return model.Vector{{Metric: model.Metric{}, Value: sc.Value, Timestamp: sc.Timestamp}}, nil
	default:
		return nil, fmt.Errorf("promtest: query %q: result type %q: want vector or scalar", expr, data.ResultType)
	}
}

// WaitForQuery repeats Query until expr returns at least one sample, and returns
// it; it gives up after timeout.
func (s *Server) WaitForQuery(expr string, timeout time.Duration) (model.Vector, error) {
	var last error
	deadline := time.Now().Add(timeout)
	for {
		v, err := s.Query(expr)
		if err == nil && len(v) > 0 {
			return v, nil
		}
		last = err
		if time.Now().After(deadline) {
			if last == nil {
				last = errors.New("no samples")
			}
			return nil, fmt.Errorf("promtest: query %q after %v: %w", expr, timeout, last)
		}
		time.Sleep(Interval / 4)
	}
}

// Target is one scrape target as /api/v1/targets reports it.
type Target struct {
	Labels     map[string]string `json:"labels"`
	ScrapeURL  string            `json:"scrapeUrl"`
	Health     string            `json:"health"`
	LastError  string            `json:"lastError"`
	LastScrape time.Time         `json:"lastScrape"`
}

// Targets returns the active scrape targets.
func (s *Server) Targets() ([]Target, error) {
	var data struct {
		ActiveTargets []Target `json:"activeTargets"`
	}
	if err := s.get("/api/v1/targets", url.Values{"state": {"active"}}, &data); err != nil {
		return nil, err
	}
	return data.ActiveTargets, nil
}

// WaitForTargets waits until every configured target has been scraped
// successfully at least once; it gives up after timeout and names the targets
// that are not up, with their last errors. Prometheus applies new targets to its
// scrape loops every 5 seconds, so allow at least 10.
func (s *Server) WaitForTargets(timeout time.Duration) error {
	deadline := time.Now().Add(timeout)
	for {
		targets, err := s.Targets()
		var down []string
		if err == nil {
			for _, tg := range targets {
				if tg.Health != "up" {
					down = append(down, fmt.Sprintf("%s %s (%s)", tg.Labels["job"], tg.ScrapeURL, tg.LastError))
				}
			}
			if len(targets) > 0 && len(down) == 0 {
				return nil
			}
		}
		if time.Now().After(deadline) {
			if err != nil {
				return fmt.Errorf("promtest: targets after %v: %w", timeout, err)
			}
			if len(down) == 0 {
				return fmt.Errorf("promtest: no targets discovered after %v", timeout)
			}
			return fmt.Errorf("promtest: targets not up after %v: %s", timeout, strings.Join(down, "; "))
		}
		time.Sleep(Interval / 4)
	}
}

// Alert is one pending or firing alert as /api/v1/alerts reports it.
type Alert struct {
	Labels      map[string]string `json:"labels"`
	Annotations map[string]string `json:"annotations"`
	// State is "pending" or "firing".
	State    string    `json:"state"`
	ActiveAt time.Time `json:"activeAt"`
	Value    string    `json:"value"`
}

// Alerts returns the pending and firing alerts.
func (s *Server) Alerts() ([]Alert, error) {
	var data struct {
		Alerts []Alert `json:"alerts"`
	}
	if err := s.get("/api/v1/alerts", nil, &data); err != nil {
		return nil, err
	}
	return data.Alerts, nil
}

// WaitForAlert waits until an alert named name is firing and returns it.
func (s *Server) WaitForAlert(ctx context.Context, name string) (Alert, error) {
	for {
		alerts, err := s.Alerts()
		if err == nil {
			for _, a := range alerts {
				if a.Labels["alertname"] == name && a.State == "firing" {
					return a, nil
				}
			}
		}
		select {
		case <-ctx.Done():
			return Alert{}, fmt.Errorf("promtest: alert %s not firing: %w (last error %v)", name, ctx.Err(), err)
		case <-time.After(Interval / 4):
		}
	}
}

// Rule is one recording or alerting rule as /api/v1/rules reports it.
type Rule struct {
	Name  string `json:"name"`
	Query string `json:"query"`
	// Type is "recording" or "alerting"; Health "ok", "err" or "unknown".
	Type      string `json:"type"`
	Health    string `json:"health"`
	LastError string `json:"lastError"`
}

// Rules returns every loaded rule with its last evaluation's health.
func (s *Server) Rules() ([]Rule, error) {
	var data struct {
		Groups []struct {
			Rules []Rule `json:"rules"`
		} `json:"groups"`
	}
	if err := s.get("/api/v1/rules", nil, &data); err != nil {
		return nil, err
	}
	var out []Rule
	for _, g := range data.Groups {
		out = append(out, g.Rules...)
	}
	return out, nil
}
