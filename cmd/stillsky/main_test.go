package main

import (
	"bytes"
	"errors"
	"os"
	"os/exec"
	"strings"
	"testing"
)

// TestMain lets a test run the binary's own main: the test executable re-runs itself
// with STILLSKY_TEST_MAIN=1 and the command line after "--".
func TestMain(m *testing.M) {
	if os.Getenv("STILLSKY_TEST_MAIN") == "1" {
		for i, a := range os.Args {
			if a == "--" {
				os.Args = append([]string{"stillsky"}, os.Args[i+1:]...)
				break
			}
		}
		main()
		os.Exit(0)
	}
	os.Exit(m.Run())
}

// runMain runs the binary with args and returns its standard error and exit code.
func runMain(t *testing.T, args ...string) (string, int) {
	t.Helper()
	cmd := exec.Command(os.Args[0], append([]string{"-test.run=^$", "--"}, args...)...)
	cmd.Env = append(os.Environ(), "STILLSKY_TEST_MAIN=1")
	var stderr bytes.Buffer
	cmd.Stderr = &stderr
	err := cmd.Run()
	var exit *exec.ExitError
	if err != nil && !errors.As(err, &exit) {
		t.Fatal(err)
	}
	return stderr.String(), cmd.ProcessState.ExitCode()
}

// The latency benchmark answers to "latency"; its former name "bench" runs the same
// command after exactly one line of notice, and errors name the current command.
func TestLatencyCommandAndFormerName(t *testing.T) {
	const notice = `stillsky: "bench" is deprecated and will be removed in the next release; use 'stillsky latency'`
	stderr, code := runMain(t, "latency", "-h")
	if code != 0 || strings.Contains(stderr, "deprecated") || !strings.Contains(stderr, "Usage of stillsky latency") {
		t.Errorf("latency -h: exit %d, stderr:\n%s", code, stderr)
	}
	stderr, code = runMain(t, "bench", "-h")
	first, rest, _ := strings.Cut(stderr, "\n")
	if code != 0 || first != notice || strings.Contains(rest, "deprecated") || !strings.HasPrefix(rest, "Usage of stillsky latency") {
		t.Errorf("bench -h: exit %d, stderr:\n%s", code, stderr)
	}
	stderr, code = runMain(t, "bench", "--no-such-flag")
	if code != 1 || !strings.Contains(stderr, "stillsky latency: flag provided but not defined: -no-such-flag") {
		t.Errorf("bench --no-such-flag: exit %d, stderr:\n%s", code, stderr)
	}
	stderr, code = runMain(t, "help")
	if code != 0 || !strings.Contains(stderr, "  latency ") || strings.Contains(stderr, "  bench ") {
		t.Errorf("help: exit %d, stderr:\n%s", code, stderr)
	}
}

// stillsky loop --autonomous refuses a threshold out of range at start, naming
// it and its range, before it listens or connects; its help names the flags and
// says the supervisor is no safety system. demo --night needs --autonomous.
func TestAutonomousFlags(t *testing.T) {
	for _, c := range []struct {
		args []string
		want string
	}{
		{[]string{"loop", "--autonomous", "--loss-fraction", "0.9", "--listen", "127.0.0.1:0", "--metrics", "-"}, "loss_fraction = 0.9, allowed (0, return_fraction = 0.6)"},
		{[]string{"loop", "--autonomous", "--return-dwell", "3s", "--listen", "127.0.0.1:0", "--metrics", "-"}, "return_dwell = 3s, allowed [0, 2s)"},
		{[]string{"loop", "--autonomous", "--long-pause", "1s", "--listen", "127.0.0.1:0", "--metrics", "-"}, "long_pause = 1s, allowed > hold_timeout = 2s"},
		{[]string{"demo", "--night", "10s"}, "--night is for --autonomous"},
	} {
		t.Run(strings.Join(c.args[:3], " "), func(t *testing.T) {
			stderr, code := runMain(t, c.args...)
			if code != 1 || !strings.Contains(stderr, c.want) {
				t.Errorf("exit %d, stderr:\n%s\nwant it to contain %q", code, stderr, c.want)
			}
		})
	}
	stderr, code := runMain(t, "loop", "-h")
	for _, s := range []string{"-autonomous", "-hold-timeout", "-min-flux", "It is not\na safety system"} {
		if code != 0 || !strings.Contains(stderr, s) {
			t.Errorf("loop -h (exit %d) lacks %q:\n%s", code, s, stderr)
		}
	}
}
