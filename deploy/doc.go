// Package deploy holds no code: it is the home of the files that run stillsky
// outside a developer's shell (systemd units, Kubernetes manifests, Prometheus
// configuration, Grafana provisioning, the container build), and of the tests
// that check them with outside validators (promtool, systemd-analyze, the
// Kubernetes API types).
//
// Nothing here may need a file from outside this repository to start: every path a
// configuration names is checked to exist.
package deploy
