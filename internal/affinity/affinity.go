// Package affinity pins a whole process to a set of CPUs, so that a simulator
// and a loop sharing a small machine each keep their own cores and caches. It
// depends on nothing of stillsky's.
package affinity

import (
	"fmt"
	"os"
	"strconv"
	"strings"

	"golang.org/x/sys/unix"
)

// Parse reads a CPU list in the kernel's format ("0", "0,2", "1-3,6"). It
// refuses empty lists, negative or reversed ranges and CPUs beyond what a
// CPU set can hold.
func Parse(list string) (unix.CPUSet, error) {
	var set unix.CPUSet
	if strings.TrimSpace(list) == "" {
		return set, fmt.Errorf("cpu list %q: empty", list)
	}
	limit := len(set) * 64
	for _, part := range strings.Split(list, ",") {
		lo, hi, isRange := strings.Cut(strings.TrimSpace(part), "-")
		a, err := strconv.Atoi(lo)
		if err != nil {
			return set, fmt.Errorf("cpu list %q: %q is not a CPU number", list, part)
		}
		b := a
		if isRange {
			if b, err = strconv.Atoi(hi); err != nil {
				return set, fmt.Errorf("cpu list %q: %q is not a CPU range", list, part)
			}
		}
		if a < 0 || b < a || b >= limit {
			return set, fmt.Errorf("cpu list %q: range %d-%d: must satisfy 0 <= first <= last < %d", list, a, b, limit)
		}
		for c := a; c <= b; c++ {
			set.Set(c)
		}
	}
	return set, nil
}

// PinProcess restricts every thread of this process to set. Threads created
// afterwards inherit the mask of the thread that creates them, so calling it
// once early covers the process's life. It fails if the set holds no CPU this
// process may use.
func PinProcess(set unix.CPUSet) error {
	tasks, err := os.ReadDir("/proc/self/task")
	if err != nil {
		return fmt.Errorf("affinity: listing threads: %w", err)
	}
	for _, t := range tasks {
		tid, err := strconv.Atoi(t.Name())
		if err != nil {
			continue
		}
		if err := unix.SchedSetaffinity(tid, &set); err != nil && err != unix.ESRCH {
			return fmt.Errorf("affinity: thread %d: %w", tid, err)
		}
	}
	return nil
}

// IdleThread puts the calling thread under SCHED_IDLE: it runs only when a
// CPU has nothing else to do, and any other thread that wakes preempts it.
// Lowering one's own policy needs no privilege. Call it from a goroutine locked
// to its thread (runtime.LockOSThread) that stays locked, so that the runtime
// ends the thread with the goroutine instead of reusing it.
func IdleThread() error {
	attr := unix.SchedAttr{Size: unix.SizeofSchedAttr, Policy: unix.SCHED_IDLE}
	return unix.SchedSetAttr(0, &attr, 0)
}
