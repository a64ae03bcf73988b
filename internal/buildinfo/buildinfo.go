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

// Commit is the VCS revision the binary was built from, with "-modified" when
// the work tree had uncommitted changes, or "unknown" when the build recorded
// none (go run, or -buildvcs=false).
func Commit() string {
	bi, ok := debug.ReadBuildInfo()
	if !ok {
		return "unknown"
	}
	var rev, modified string
	for _, s := range bi.Settings {
		switch s.Key {
		case "vcs.revision":
			rev = s.Value
		case "vcs.modified":
			modified = s.Value
		}
	}
	if rev == "" {
		return "unknown"
	}
	if modified == "true" {
		rev += "-modified"
	}
	return rev
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
