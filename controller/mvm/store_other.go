//go:build !linux

package mvm

import "unsafe"

// store returns n zero bytes for the stored matrix, starting on a cache line.
func store[T any](_ *T, n int) unsafe.Pointer { return alignedBytes(n) }
