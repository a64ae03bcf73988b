//go:build !linux

package mvm

import "runtime"

// osYield falls back to yielding to other goroutines where sched_yield(2) is
// not wired up.
func osYield() { runtime.Gosched() }
