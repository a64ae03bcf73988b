// Package buildinfo reports the version of the binary, in logs and as the
// stillsky_build_info metric that both the bench and the loop daemon export.
package buildinfo

import (
	"runtime"
	"runtime/debug"

	"github.com/prometheus/client_golang/prometheus"
)

// Version is the module version recorded by the Go toolchain, or "devel" for a
// build from a work tree.
func Version() string {
	if bi, ok := debug.ReadBuildInfo(); ok && bi.Main.Version != "" && bi.Main.Version != "(devel)" {
		return bi.Main.Version
	}
	return "devel"
}

// Register adds stillsky_build_info (constant 1, labelled with the version and the
// Go version) to reg.
func Register(reg prometheus.Registerer) error {
	g := prometheus.NewGaugeVec(prometheus.GaugeOpts{
		Name: "stillsky_build_info",
		Help: "Build of the running binary; the value is always 1.",
	}, []string{"version", "goversion"})
	g.WithLabelValues(Version(), runtime.Version()).Set(1)
	return reg.Register(g)
}
