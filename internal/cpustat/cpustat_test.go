package cpustat

import (
	"os"
	"path/filepath"
	"runtime"
	"testing"
)

// TestStealPercent reads the cpu line as proc(5) lays it out: user nice system
// idle iowait irq softirq steal guest guest_nice, in clock ticks.
func TestStealPercent(t *testing.T) {
	dir := t.TempDir()
	write := func(name, line string) string {
		p := filepath.Join(dir, name)
		if err := os.WriteFile(p, []byte(line+"\ncpu0 1 2 3 4 5 6 7 8 9 10\n"), 0o644); err != nil {
			t.Fatal(err)
		}
		return p
	}
	a, errA := Read(write("a", "cpu  100 0 50 800 0 0 0 50 30 0"))
	b, errB := Read(write("b", "cpu  200 0 100 1500 0 0 0 200 60 0"))
	// 1000 ticks passed (guest time is inside user time), 150 of them stolen.
	if got := StealPercent(a, b, errA, errB); got != 15 {
		t.Errorf("steal %v %%, want 15 %%", got)
	}
	if _, err := Read(write("c", "cpu  1 2 3")); err == nil {
		t.Error("a short cpu line was accepted")
	}
	if got := StealPercent(a, a, nil, nil); got != -1 {
		t.Errorf("no time passed: steal %v, want -1", got)
	}
	if runtime.GOOS == "linux" {
		if m, err := Read("/proc/stat"); err != nil || m.Total == 0 {
			t.Errorf("this machine's /proc/stat: %+v, %v", m, err)
		}
	}
}

// TestPressurePercent reads /proc/pressure/cpu as the kernel lays it out
// (Documentation/accounting/psi.rst: "some avg10=… avg60=… avg300=… total=…",
// total in µs) and turns two readings into the share of wall time.
func TestPressurePercent(t *testing.T) {
	dir := t.TempDir()
	write := func(name, body string) string {
		p := filepath.Join(dir, name)
		if err := os.WriteFile(p, []byte(body), 0o644); err != nil {
			t.Fatal(err)
		}
		return p
	}
	a, errA := ReadPressure(write("a", "some avg10=1.00 avg60=2.00 avg300=3.00 total=1000000\nfull avg10=0.00 avg60=0.00 avg300=0.00 total=0\n"))
	b, errB := ReadPressure(write("b", "some avg10=1.00 avg60=2.00 avg300=3.00 total=1250000\nfull avg10=0.00 avg60=0.00 avg300=0.00 total=0\n"))
	if errA != nil || errB != nil || a != 1000000 || b != 1250000 {
		t.Fatalf("read %d, %d (%v, %v): want 1000000, 1250000", a, b, errA, errB)
	}
	// 250 ms of waiting in 1 s of wall time.
	if got := PressurePercent(a, b, nil, nil, 1e9); got != 25 {
		t.Errorf("pressure %v %%, want 25 %%", got)
	}
	for name, body := range map[string]string{"no some line": "full total=3\n", "no total": "some avg10=1.00\n", "bad total": "some total=x\n"} {
		t.Run(name, func(t *testing.T) {
			if _, err := ReadPressure(write("bad", body)); err == nil {
				t.Errorf("%q was accepted", body)
			}
		})
	}
	if got := PressurePercent(a, b, nil, nil, 0.248e9); got != 100 {
		t.Errorf("250 ms of waiting read over 248 ms: pressure %v %%, want 100 %%", got)
	}
	if got := PressurePercent(b, a, nil, nil, 1e9); got != -1 {
		t.Errorf("counter went back: pressure %v, want -1", got)
	}
	if got := PressurePercent(a, b, nil, nil, 0); got != -1 {
		t.Errorf("no time passed: pressure %v, want -1", got)
	}
	if _, err := os.Stat("/proc/pressure/cpu"); err == nil {
		if _, err := ReadPressure("/proc/pressure/cpu"); err != nil {
			t.Errorf("this machine's /proc/pressure/cpu: %v", err)
		}
	}
}
