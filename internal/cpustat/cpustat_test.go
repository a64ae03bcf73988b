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
