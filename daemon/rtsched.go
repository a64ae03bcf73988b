package daemon

import (
	"fmt"
	"log/slog"
	"runtime/debug"
	"strings"
	"time"

	"golang.org/x/sys/unix"
)

// Realtime asks the operating system for real-time treatment of the loop. Each
// request that the process is not permitted (no CAP_SYS_NICE, CAP_IPC_LOCK or the
// matching rlimits) is reported in one log line and the loop runs without it.
type Realtime struct {
	// Pin pins the real-time goroutine's OS thread to CPU.
	Pin bool
	CPU int
	// FIFOPriority, in 1–99, puts that thread under SCHED_FIFO; 0 leaves it under
	// the normal scheduler. On a machine with few cores keep one core for the rest.
	FIFOPriority int
	// LockMemory calls mlockall so that no page of the process is swapped out or
	// faulted in during a frame; it is a setting of the whole process, which
	// ProcessSettings makes.
	LockMemory bool
	// Spin, if above 0, runs the real-time goroutine on a locked thread of its
	// own (pinned with Pin) that, after each command, polls for the next frame
	// for up to Spin before it blocks: a frame that comes within Spin finds the
	// thread running, so the wake-up of a sleeping thread, and on a virtual
	// machine of a halted vCPU, is off the critical path. The thread keeps its
	// CPU busy while it polls: a spin of about a frame period keeps a whole CPU
	// busy, so leave it off on a machine whose CPUs are all needed elsewhere.
	Spin time.Duration
}

func (r Realtime) validate() error {
	if r.Pin && r.CPU < 0 {
		return fmt.Errorf("daemon: real-time cpu %d: must be >= 0", r.CPU)
	}
	if r.Spin < 0 {
		return fmt.Errorf("daemon: real-time spin %v: must be >= 0", r.Spin)
	}
	if r.FIFOPriority < 0 || r.FIFOPriority > 99 {
		return fmt.Errorf("daemon: SCHED_FIFO priority %d: must be in 1–99, or 0 for none", r.FIFOPriority)
	}
	return nil
}

// gcPercent is the GOGC a loop process runs with unless the GOGC environment variable
// says otherwise. The hot path allocates nothing in the daemon's own code, so the
// garbage comes from the control plane and gRPC's per-message buffers; a
// collection every 4× growth of the live heap keeps collections rare without
// letting the heap grow without bound. The soft memory limit below bounds it
// absolutely.
const (
	gcPercent   = 400
	memoryLimit = 2 << 30
)

// ProcessSettings applies the settings of a process that runs the loop daemon:
// GOGC 400 and a 2 GiB soft memory limit, unless the GOGC and GOMEMLIMIT
// environment variables say otherwise, and mlockall when r.LockMemory asks for
// it. They belong to the whole process, so the process makes them, once, before
// Run (stillsky loop, demo, latency and sweep do); the daemon itself changes
// nothing process-wide.
func ProcessSettings(r Realtime, log *slog.Logger) {
	if log == nil {
		log = slog.New(slog.DiscardHandler)
	}
	if old := debug.SetGCPercent(-1); old == 100 { // 100 is the default: GOGC was not set
		debug.SetGCPercent(gcPercent)
	} else {
		debug.SetGCPercent(old)
	}
	if debug.SetMemoryLimit(-1) == int64(^uint64(0)>>1) { // GOMEMLIMIT not set
		debug.SetMemoryLimit(memoryLimit)
	}
	if r.LockMemory {
		if err := unix.Mlockall(unix.MCL_CURRENT | unix.MCL_FUTURE); err != nil {
			log.Warn("memory not locked (needs CAP_IPC_LOCK or a high RLIMIT_MEMLOCK); pages may fault during frames", "err", err)
		} else {
			log.Info("memory locked (mlockall)")
		}
	}
}

// applyToThread pins and prioritises the calling OS thread (the real-time
// goroutine, already locked to it) and logs what it could not do, in one line.
// It reports whether it changed the thread, which must then never return to the
// runtime's pool.
func (r Realtime) applyToThread(log *slog.Logger) (changed bool) {
	var done, refused []string
	if r.Pin {
		var set unix.CPUSet
		set.Set(r.CPU)
		if err := unix.SchedSetaffinity(0, &set); err != nil {
			refused = append(refused, fmt.Sprintf("cpu %d affinity: %v", r.CPU, err))
		} else {
			done = append(done, fmt.Sprintf("pinned to cpu %d", r.CPU))
		}
	}
	if r.FIFOPriority > 0 {
		attr := unix.SchedAttr{Size: unix.SizeofSchedAttr, Policy: unix.SCHED_FIFO, Priority: uint32(r.FIFOPriority)}
		if err := unix.SchedSetAttr(0, &attr, 0); err != nil {
			refused = append(refused, fmt.Sprintf("SCHED_FIFO %d: %v (needs CAP_SYS_NICE or RLIMIT_RTPRIO)", r.FIFOPriority, err))
		} else {
			done = append(done, fmt.Sprintf("SCHED_FIFO priority %d", r.FIFOPriority))
		}
	}
	changed = len(done) > 0
	if len(refused) > 0 {
		log.Warn("real-time thread settings not permitted; running without them", "refused", strings.Join(refused, "; "), "applied", strings.Join(done, ", "))
	} else if len(done) > 0 {
		log.Info("real-time thread", "settings", strings.Join(done, ", "))
	}
	return changed
}
