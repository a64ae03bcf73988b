package monoclock

import (
	"testing"

	"golang.org/x/sys/unix"
)

// Now must agree with a direct CLOCK_MONOTONIC read (the kernel's clock, not ours).
func TestNowMatchesKernelClock(t *testing.T) {
	var ts unix.Timespec
	for i := 0; i < 5; i++ {
		before := Now()
		if err := unix.ClockGettime(unix.CLOCK_MONOTONIC, &ts); err != nil {
			t.Skipf("CLOCK_MONOTONIC unavailable: %v", err)
		}
		after := Now()
		k := ts.Nano()
		// The system call sits between the two reads; allow 1 ms for scheduling.
		if k < before-1e6 || k > after+1e6 {
			t.Fatalf("kernel clock %d outside [%d, %d]", k, before, after)
		}
	}
}
