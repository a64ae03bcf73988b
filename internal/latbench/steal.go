package latbench

import (
	"bufio"
	"fmt"
	"os"
	"strconv"
	"strings"
)

// cpuTimes are the machine-wide counters of /proc/stat's "cpu" line, in clock
// ticks (proc(5)).
type cpuTimes struct {
	steal, total uint64
}

// readCPUTimes reads /proc/stat. Steal is the eighth value: time the
// hypervisor ran something else while this guest's virtual CPUs wanted to run.
func readCPUTimes(path string) (cpuTimes, error) {
	f, err := os.Open(path)
	if err != nil {
		return cpuTimes{}, err
	}
	defer f.Close()
	sc := bufio.NewScanner(f)
	for sc.Scan() {
		fields := strings.Fields(sc.Text())
		if len(fields) == 0 || fields[0] != "cpu" {
			continue
		}
		if len(fields) < 9 {
			return cpuTimes{}, fmt.Errorf("%s: cpu line has %d values, want at least 8", path, len(fields)-1)
		}
		var t cpuTimes
		for i, s := range fields[1:] {
			v, err := strconv.ParseUint(s, 10, 64)
			if err != nil {
				return cpuTimes{}, fmt.Errorf("%s: cpu value %d %q: %w", path, i+1, s, err)
			}
			if i < 8 { // guest time (9th, 10th) is already counted in user time
				t.total += v
			}
			if i == 7 {
				t.steal = v
			}
		}
		return t, nil
	}
	if err := sc.Err(); err != nil {
		return cpuTimes{}, err
	}
	return cpuTimes{}, fmt.Errorf("%s: no cpu line", path)
}

// stealPercent is the share of CPU time stolen between a and b, or -1 when
// it cannot be told.
func stealPercent(a, b cpuTimes, errA, errB error) float64 {
	if errA != nil || errB != nil || b.total <= a.total {
		return -1
	}
	return 100 * float64(b.steal-a.steal) / float64(b.total-a.total)
}
