//go:build !amd64

package mvm

// archKernels is empty off amd64: only the pure-Go kernel exists.
func archKernels() []kernel { return nil }

// pause is a no-op where no spin-wait hint is wired up.
func pause() {}
