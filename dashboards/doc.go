// Package dashboards holds the monitoring that operations staff use on the night:
// the Grafana dashboards (built here from Go with the Grafana Foundation SDK and
// committed as JSON under grafana/), the Prometheus recording and alert rules
// (rules/), and the list of metric names they are allowed to use (KnownMetrics),
// which is the metrics contract of the loop daemon and the simulated bench.
//
// Run `go generate ./dashboards` after changing a dashboard; a test fails when the
// committed JSON differs from what the code builds.
//
// It must not depend on the daemon, the bench or anything that talks to a device:
// it describes metrics, it does not produce them.
package dashboards

//go:generate go run ./internal/generate -out grafana
