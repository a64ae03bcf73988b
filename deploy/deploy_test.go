package deploy

import (
	"bytes"
	"encoding/json"
	"errors"
	"io"
	"io/fs"
	"os"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
	"testing"

	"go.yaml.in/yaml/v3"
	appsv1 "k8s.io/api/apps/v1"
	corev1 "k8s.io/api/core/v1"
	k8syaml "sigs.k8s.io/yaml"
)

// root is the repository root; go test runs in deploy/.
const root = ".."

// documents splits a YAML file into its documents, each decoded as a node.
func documents(t *testing.T, path string) [][]byte {
	t.Helper()
	data, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	var docs [][]byte
	dec := yaml.NewDecoder(bytes.NewReader(data))
	for {
		var n yaml.Node
		err := dec.Decode(&n)
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			t.Fatalf("%s: document %d: %v", path, len(docs)+1, err)
		}
		out, err := yaml.Marshal(&n)
		if err != nil {
			t.Fatal(err)
		}
		docs = append(docs, out)
	}
	if len(docs) == 0 {
		t.Fatalf("%s: no YAML document", path)
	}
	return docs
}

func TestEveryFileParses(t *testing.T) {
	n := 0
	err := filepath.WalkDir(".", func(path string, d fs.DirEntry, err error) error {
		if err != nil || d.IsDir() {
			return err
		}
		switch filepath.Ext(path) {
		case ".yaml", ".yml":
			documents(t, path)
		case ".json":
			data, err := os.ReadFile(path)
			if err != nil {
				return err
			}
			if !json.Valid(data) {
				t.Errorf("%s: not valid JSON", path)
			}
		default:
			return nil
		}
		n++
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	if n < 9 {
		t.Errorf("parsed %d YAML/JSON files under deploy/; expected the manifests, Prometheus and Grafana files", n)
	}
}

// manifests holds the decoded objects of deploy/kubernetes.
type manifests struct {
	namespaces  []corev1.Namespace
	configMaps  []corev1.ConfigMap
	services    []corev1.Service
	deployments []appsv1.Deployment
}

// loadManifests decodes every object listed in kustomization.yaml strictly into
// the Kubernetes API types, so a misspelt or misplaced field fails (Kubernetes
// API reference, apps/v1 and core/v1).
func loadManifests(t *testing.T) manifests {
	t.Helper()
	dir := "kubernetes"
	var kust struct {
		APIVersion string   `yaml:"apiVersion"`
		Kind       string   `yaml:"kind"`
		Namespace  string   `yaml:"namespace"`
		Resources  []string `yaml:"resources"`
	}
	data, err := os.ReadFile(filepath.Join(dir, "kustomization.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	if err := yaml.Unmarshal(data, &kust); err != nil {
		t.Fatal(err)
	}
	if kust.APIVersion != "kustomize.config.k8s.io/v1beta1" || kust.Kind != "Kustomization" || kust.Namespace != "stillsky" {
		t.Errorf("kustomization: apiVersion %q kind %q namespace %q", kust.APIVersion, kust.Kind, kust.Namespace)
	}
	files, err := filepath.Glob(filepath.Join(dir, "*.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	var want []string
	for _, f := range files {
		if filepath.Base(f) != "kustomization.yaml" {
			want = append(want, filepath.Base(f))
		}
	}
	got := slices.Sorted(slices.Values(kust.Resources))
	if !slices.Equal(got, want) {
		t.Errorf("kustomization resources %v: want every manifest in the folder %v", got, want)
	}

	var m manifests
	for _, res := range kust.Resources {
		for i, doc := range documents(t, filepath.Join(dir, res)) {
			where := res + " document " + string(rune('1'+i))
			var head struct {
				APIVersion string `yaml:"apiVersion"`
				Kind       string `yaml:"kind"`
				Metadata   struct {
					Name      string `yaml:"name"`
					Namespace string `yaml:"namespace"`
				} `yaml:"metadata"`
			}
			if err := yaml.Unmarshal(doc, &head); err != nil {
				t.Fatalf("%s: %v", where, err)
			}
			if head.APIVersion == "" || head.Kind == "" || head.Metadata.Name == "" {
				t.Errorf("%s: apiVersion %q kind %q metadata.name %q: all three are required", where, head.APIVersion, head.Kind, head.Metadata.Name)
			}
			if head.Kind != "Namespace" && head.Metadata.Namespace != "stillsky" {
				t.Errorf("%s: %s %s: namespace %q, want stillsky", where, head.Kind, head.Metadata.Name, head.Metadata.Namespace)
			}
			var target any
			switch head.APIVersion + " " + head.Kind {
			case "v1 Namespace":
				m.namespaces = append(m.namespaces, corev1.Namespace{})
				target = &m.namespaces[len(m.namespaces)-1]
			case "v1 ConfigMap":
				m.configMaps = append(m.configMaps, corev1.ConfigMap{})
				target = &m.configMaps[len(m.configMaps)-1]
			case "v1 Service":
				m.services = append(m.services, corev1.Service{})
				target = &m.services[len(m.services)-1]
			case "apps/v1 Deployment":
				m.deployments = append(m.deployments, appsv1.Deployment{})
				target = &m.deployments[len(m.deployments)-1]
			default:
				t.Errorf("%s: %s %s: no check for this kind; add one", where, head.APIVersion, head.Kind)
				continue
			}
			if err := k8syaml.UnmarshalStrict(doc, target); err != nil {
				t.Errorf("%s: %v", where, err)
			}
		}
	}
	if len(m.namespaces) != 1 || len(m.configMaps) != 1 || len(m.services) != 2 || len(m.deployments) != 2 {
		t.Fatalf("found %d namespaces, %d config maps, %d services, %d deployments: want 1, 1, 2, 2",
			len(m.namespaces), len(m.configMaps), len(m.services), len(m.deployments))
	}
	return m
}

func deployment(t *testing.T, m manifests, name string) appsv1.Deployment {
	t.Helper()
	for _, d := range m.deployments {
		if d.Name == name {
			return d
		}
	}
	t.Fatalf("no Deployment %s", name)
	return appsv1.Deployment{}
}

// TestDeploymentsGuaranteedWholeCPUs: a pod is in the Guaranteed QoS class when
// every container sets CPU and memory limits equal to its requests (Kubernetes
// documentation, "Configure Quality of Service for Pods"); the static CPU
// manager policy gives exclusive CPUs only to Guaranteed containers whose CPU
// request is a whole number (Kubernetes documentation, "Control CPU Management
// Policies on the Node").
func TestDeploymentsGuaranteedWholeCPUs(t *testing.T) {
	for _, d := range loadManifests(t).deployments {
		spec := d.Spec.Template.Spec
		for _, c := range append(slices.Clone(spec.InitContainers), spec.Containers...) {
			where := d.Name + "/" + c.Name
			for _, res := range []corev1.ResourceName{corev1.ResourceCPU, corev1.ResourceMemory} {
				req, okReq := c.Resources.Requests[res]
				lim, okLim := c.Resources.Limits[res]
				if !okReq || !okLim || req.Cmp(lim) != 0 {
					t.Errorf("%s: %s request %v limit %v: both must be set and equal", where, res, req.String(), lim.String())
				}
			}
			for res := range c.Resources.Requests {
				if _, ok := c.Resources.Limits[res]; !ok {
					t.Errorf("%s: %s requested but not limited", where, res)
				}
			}
			cpu := c.Resources.Requests[corev1.ResourceCPU]
			if milli := cpu.MilliValue(); milli <= 0 || milli%1000 != 0 {
				t.Errorf("%s: cpu %s: want a whole number of CPUs", where, cpu.String())
			}
		}
	}
}

// healthServices are the grpc.health.v1 service names the servers register
// (metrics contract: "" and the stillsky.v1 services).
var healthServices = []string{"", "stillsky.v1.ControlService", "stillsky.v1.CameraService", "stillsky.v1.MirrorService"}

func TestProbesUseGRPCHealth(t *testing.T) {
	for _, d := range loadManifests(t).deployments {
		for _, c := range d.Spec.Template.Spec.Containers {
			ports := map[int32]bool{}
			for _, p := range c.Ports {
				ports[p.ContainerPort] = true
			}
			probes := map[string]*corev1.Probe{"liveness": c.LivenessProbe, "readiness": c.ReadinessProbe, "startup": c.StartupProbe}
			for kind, p := range probes {
				where := d.Name + "/" + c.Name + " " + kind
				if p == nil {
					if kind != "startup" {
						t.Errorf("%s: missing", where)
					}
					continue
				}
				if p.GRPC == nil || p.HTTPGet != nil || p.TCPSocket != nil || p.Exec != nil {
					t.Errorf("%s: want a grpc probe and nothing else", where)
					continue
				}
				if !ports[p.GRPC.Port] {
					t.Errorf("%s: port %d is not a container port", where, p.GRPC.Port)
				}
				service := ""
				if p.GRPC.Service != nil {
					service = *p.GRPC.Service
				}
				if !slices.Contains(healthServices, service) {
					t.Errorf("%s: health service %q is not one the servers register", where, service)
				}
			}
		}
	}
}

func TestServicesSelectTheirPods(t *testing.T) {
	m := loadManifests(t)
	for _, d := range m.deployments {
		for k, v := range d.Spec.Selector.MatchLabels {
			if d.Spec.Template.Labels[k] != v {
				t.Errorf("deployment %s: selector %s=%s does not match its pod template", d.Name, k, v)
			}
		}
	}
	for _, s := range m.services {
		d := deployment(t, m, s.Name)
		for k, v := range s.Spec.Selector {
			if d.Spec.Template.Labels[k] != v {
				t.Errorf("service %s: selector %s=%s does not match deployment %s", s.Name, k, v, d.Name)
			}
		}
		named := map[string]int32{}
		for _, c := range d.Spec.Template.Spec.Containers {
			for _, p := range c.Ports {
				named[p.Name] = p.ContainerPort
			}
		}
		for _, p := range s.Spec.Ports {
			if cp, ok := named[p.TargetPort.String()]; !ok || cp != p.Port {
				t.Errorf("service %s: port %d targets %q, which is not container port %d", s.Name, p.Port, p.TargetPort.String(), p.Port)
			}
		}
	}
}

func TestScrapeAnnotationsNameTheMetricsPort(t *testing.T) {
	for _, d := range loadManifests(t).deployments {
		a := d.Spec.Template.Annotations
		if a["prometheus.io/scrape"] != "true" || a["prometheus.io/path"] != "/metrics" {
			t.Errorf("%s: scrape annotations %v", d.Name, a)
		}
		found := false
		for _, c := range d.Spec.Template.Spec.Containers {
			for _, p := range c.Ports {
				if p.Name == "metrics" && a["prometheus.io/port"] == strconv.Itoa(int(p.ContainerPort)) {
					found = true
				}
			}
		}
		if !found {
			t.Errorf("%s: prometheus.io/port %q is not the container port named metrics", d.Name, a["prometheus.io/port"])
		}
	}
}

// arg returns the value after flag in a container's arguments.
func arg(t *testing.T, c corev1.Container, flag string) string {
	t.Helper()
	i := slices.Index(c.Args, flag)
	if i < 0 || i+1 >= len(c.Args) {
		t.Fatalf("container %s: no %s in %v", c.Name, flag, c.Args)
	}
	return c.Args[i+1]
}

// TestScenarioConfigMapIsTheBuiltin keeps the ConfigMap's copy of the default
// scenario equal to the file the bench embeds, and checks the bench reads it.
func TestScenarioConfigMapIsTheBuiltin(t *testing.T) {
	m := loadManifests(t)
	want, err := os.ReadFile(filepath.Join(root, "sim", "scenario", "builtin", "default.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	cm := m.configMaps[0]
	if got := cm.Data["default.yaml"]; got != string(want) {
		t.Errorf("configmap %s: default.yaml differs from sim/scenario/builtin/default.yaml; copy the file again", cm.Name)
	}
	sim := deployment(t, m, "stillsky-sim")
	c := sim.Spec.Template.Spec.Containers[0]
	path := arg(t, c, "--scenario")
	ok := false
	for _, vm := range c.VolumeMounts {
		for _, v := range sim.Spec.Template.Spec.Volumes {
			if v.Name == vm.Name && v.ConfigMap != nil && v.ConfigMap.Name == cm.Name {
				key := strings.TrimPrefix(path, vm.MountPath+"/")
				_, ok = cm.Data[key]
			}
		}
	}
	if !ok {
		t.Errorf("sim --scenario %s is not a key of the mounted configmap %s", path, cm.Name)
	}
}

// TestLoopReachesTheSim checks that the loop's --camera and --mirror name the
// bench's Service and ports, and that the listeners bind all addresses (probes
// and Services reach a pod by its IP).
func TestLoopReachesTheSim(t *testing.T) {
	m := loadManifests(t)
	loop := deployment(t, m, "stillsky-loop").Spec.Template.Spec.Containers[0]
	for flag, port := range map[string]string{"--camera": "stillsky-sim:7401", "--mirror": "stillsky-sim:7402"} {
		if got := arg(t, loop, flag); got != port {
			t.Errorf("loop %s %s: want %s", flag, got, port)
		}
	}
	svc := map[string]int32{}
	for _, s := range m.services {
		for _, p := range s.Spec.Ports {
			svc[s.Name+"/"+p.Name] = p.Port
		}
	}
	if svc["stillsky-sim/camera"] != 7401 || svc["stillsky-sim/mirror"] != 7402 {
		t.Errorf("stillsky-sim service ports %v: want camera 7401 and mirror 7402", svc)
	}
	for _, d := range m.deployments {
		c := d.Spec.Template.Spec.Containers[0]
		for _, flag := range []string{"--camera", "--mirror", "--metrics", "--listen"} {
			i := slices.Index(c.Args, flag)
			if i < 0 || (d.Name == "stillsky-loop" && (flag == "--camera" || flag == "--mirror")) {
				continue
			}
			if !strings.HasPrefix(c.Args[i+1], "0.0.0.0:") {
				t.Errorf("%s %s %s: in a pod, listen on 0.0.0.0", d.Name, flag, c.Args[i+1])
			}
		}
	}
}
