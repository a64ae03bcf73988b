// Package cpustat reads the machine-wide CPU time counters of /proc/stat and
// /proc/pressure/cpu, for the two figures a benchmark on a shared virtual
// machine must report beside its latencies: the time the hypervisor stole, and
// the time runnable tasks waited for a CPU. It depends on nothing of stillsky's.
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

// ReadPressure reads the "some" line of a file laid out as /proc/pressure/cpu,
// the kernel's pressure stall information (Linux 4.20 and later; the kernel's
// Documentation/accounting/psi.rst): the total time, µs, in which at least
// one runnable task waited for a CPU. On a machine whose CPUs are shared by
// more runnable threads than it has, this is what a latency benchmark's tails
// follow, where steal only counts the hypervisor's share.
func ReadPressure(path string) (uint64, error) {
	b, err := os.ReadFile(path)
	if err != nil {
		return 0, err
	}
	for _, line := range strings.Split(string(b), "\n") {
		fields := strings.Fields(line)
		if len(fields) == 0 || fields[0] != "some" {
			continue
		}
		for _, f := range fields[1:] {
			if v, ok := strings.CutPrefix(f, "total="); ok {
				n, err := strconv.ParseUint(v, 10, 64)
				if err != nil {
					return 0, fmt.Errorf("%s: some total %q: %w", path, v, err)
				}
				return n, nil
			}
		}
		return 0, fmt.Errorf("%s: some line has no total=", path)
	}
	return 0, fmt.Errorf("%s: no some line", path)
}

// PressurePercent is the share of the wall time elapsedNs between two
// readings of ReadPressure in which some task waited for a CPU, percent, or
// −1 when it cannot be told (either read failed, or no time passed). The
// readings and the clock are not taken at one instant, so a saturated
// interval can read up to a percent above 100 (100.7 seen here over 1 s); it
// counts as 100.
func PressurePercent(a, b uint64, errA, errB error, elapsedNs int64) float64 {
	if errA != nil || errB != nil || elapsedNs <= 0 || b < a {
		return -1
	}
	return min(100, 100*float64(b-a)*1e3/float64(elapsedNs))
}
