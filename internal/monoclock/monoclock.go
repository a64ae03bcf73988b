// Package monoclock reads the host's CLOCK_MONOTONIC in nanoseconds, the one clock
// that frame and command timestamps use so that processes on one machine can be
// compared (docs/hot-path.md, "Timestamps").
package monoclock

import (
	"time"

	"golang.org/x/sys/unix"
)

// The Go runtime's monotonic reading is CLOCK_MONOTONIC too, but unexported; one
// system call at start-up fixes the offset and Now costs only a vDSO time read.
var (
	baseTime = time.Now()
	baseMono = readMono()
)

func readMono() int64 {
	var ts unix.Timespec
	if err := unix.ClockGettime(unix.CLOCK_MONOTONIC, &ts); err != nil {
		// Without CLOCK_MONOTONIC, timestamps are still consistent within one process.
		return 0
	}
	return ts.Nano()
}

// Now returns CLOCK_MONOTONIC in nanoseconds.
func Now() int64 {
	return baseMono + int64(time.Since(baseTime))
}
