// Package cpustat reads the machine-wide CPU time counters of /proc/stat, for
// the one figure a benchmark on a virtual machine must report beside its
// latencies: the time the hypervisor stole. It depends on nothing of stillsky's.
package cpustat

import (
	"bufio"
	"fmt"
	"os"
	"strconv"
	"strings"
)

// Times are the machine-wide counters of /proc/stat's "cpu" line, in clock
// ticks (proc(5)).
type Times struct {
	Steal, Total uint64
}

// Read reads a file laid out as /proc/stat (normally "/proc/stat"). Steal is the eighth value: time the
// hypervisor ran something else while this guest's virtual CPUs wanted to run.
func Read(path string) (Times, error) {
	f, err := os.Open(path)
	if err != nil {
		return Times{}, err
	}
	defer f.Close()
	sc := bufio.NewScanner(f)
	for sc.Scan() {
		fields := strings.Fields(sc.Text())
		if len(fields) == 0 || fields[0] != "cpu" {
			continue
		}
		if len(fields) < 9 {
			return Times{}, fmt.Errorf("%s: cpu line has %d values, want at least 8", path, len(fields)-1)
		}
		var t Times
		for i, s := range fields[1:] {
			v, err := strconv.ParseUint(s, 10, 64)
			if err != nil {
				return Times{}, fmt.Errorf("%s: cpu value %d %q: %w", path, i+1, s, err)
			}
			if i < 8 { // guest time (9th, 10th) is already counted in user time
				t.Total += v
			}
			if i == 7 {
				t.Steal = v
			}
		}
		return t, nil
	}
	if err := sc.Err(); err != nil {
		return Times{}, err
	}
	return Times{}, fmt.Errorf("%s: no cpu line", path)
}

// StealPercent is the share of CPU time stolen between a and b, or −1 when
// it cannot be told (either read failed, or no time passed).
func StealPercent(a, b Times, errA, errB error) float64 {
	if errA != nil || errB != nil || b.Total <= a.Total {
		return -1
	}
	return 100 * float64(b.Steal-a.Steal) / float64(b.Total-a.Total)
}
