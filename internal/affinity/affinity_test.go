package affinity

import (
	"os"
	"strconv"
	"testing"

	"golang.org/x/sys/unix"
)

// TestParse follows the kernel's cpu list format (Documentation/admin-guide/
// cputopology, "0-3,6"), which taskset -c also reads.
func TestParse(t *testing.T) {
	for _, c := range []struct {
		list string
		want []int
	}{
		{"0", []int{0}},
		{"1,3", []int{1, 3}},
		{"0-2, 5", []int{0, 1, 2, 5}},
	} {
		t.Run(c.list, func(t *testing.T) {
			set, err := Parse(c.list)
			if err != nil {
				t.Fatalf("%q: %v", c.list, err)
			}
			if set.Count() != len(c.want) {
				t.Errorf("%q: %d CPUs, want %v", c.list, set.Count(), c.want)
			}
			for _, cpu := range c.want {
				if !set.IsSet(cpu) {
					t.Errorf("%q: CPU %d not set", c.list, cpu)
				}
			}
		})
	}
	for _, bad := range []string{"", "x", "3-1", "-1", "0-", "99999"} {
		if _, err := Parse(bad); err == nil {
			t.Errorf("%q accepted", bad)
		}
	}
}

// TestPinProcess pins the test process to one CPU it already may use and
// reads every thread's mask back from the kernel, then restores the old one.
func TestPinProcess(t *testing.T) {
	var old unix.CPUSet
	if err := unix.SchedGetaffinity(0, &old); err != nil {
		t.Fatal(err)
	}
	cpu := -1
	for c := range len(old) * 64 {
		if old.IsSet(c) {
			cpu = c
		}
	}
	var one unix.CPUSet
	one.Set(cpu)
	if err := PinProcess(one); err != nil {
		t.Fatal(err)
	}
	defer PinProcess(old)
	tasks, err := os.ReadDir("/proc/self/task")
	if err != nil {
		t.Fatal(err)
	}
	for _, task := range tasks {
		tid, _ := strconv.Atoi(task.Name())
		var got unix.CPUSet
		if err := unix.SchedGetaffinity(tid, &got); err != nil {
			continue // the thread ended
		}
		if got != one {
			t.Errorf("thread %d: mask %v, want only CPU %d", tid, got, cpu)
		}
	}
}
