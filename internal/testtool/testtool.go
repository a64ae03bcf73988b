// Package testtool finds the outside programs that some tests check our output
// with (fitsverify, python3 with astropy, promtool, prometheus, chromium).
//
// On a developer's machine a missing program skips the test with a message that
// says which Debian package provides it. Under CI=true, where .ci/run has installed
// every such package, a missing program fails the test instead.
package testtool

import (
	"os"
	"os/exec"
	"testing"
)

// Require returns the path of program, or skips (fails under CI=true) when it is
// not on PATH. pkg names the Debian package that provides it.
func Require(t testing.TB, program, pkg string) string {
	t.Helper()
	path, err := exec.LookPath(program)
	if err == nil {
		return path
	}
	Missing(t, program+" not found on PATH (Debian package "+pkg+")")
	return ""
}

// Missing skips the test with reason, or fails it under CI=true.
func Missing(t testing.TB, reason string) {
	t.Helper()
	if os.Getenv("CI") == "true" {
		t.Fatalf("CI=true but %s; .ci/run should have installed it", reason)
	}
	t.Skipf("skipping: %s; install it to run this check", reason)
}
