package mvm

import "syscall"

// osYield gives the core to another runnable thread, if any (sched_yield(2)).
// runtime.Gosched only yields to goroutines: when the OS has put the caller
// and a worker on one core, the spinner must let the other thread run.
func osYield() { syscall.RawSyscall(syscall.SYS_SCHED_YIELD, 0, 0, 0) }
