//go:build amd64

package mvm

import (
	"unsafe"

	"golang.org/x/sys/cpu"
)

// The assembly kernels follow the gemvFunc contract. Each processes 4 rows at
// a time (the AVX-512 float32 one 8 while it can) so one load of x feeds
// several FMAs, with two accumulators per row (8 or 16 independent FMA
// chains, enough to cover the 4-cycle FMA latency at two FMAs per cycle).

//go:noescape
func gemvF32AVX2(a unsafe.Pointer, stride uintptr, groups int, x *float32, n int, y *float32, add bool)

//go:noescape
func gemvF32AVX512(a unsafe.Pointer, stride uintptr, groups int, x *float32, n int, y *float32, add bool)

//go:noescape
func gemvBF16AVX2(a unsafe.Pointer, stride uintptr, groups int, x *float32, n int, y *float32, add bool)

//go:noescape
func gemvBF16AVX512(a unsafe.Pointer, stride uintptr, groups int, x *float32, n int, y *float32, add bool)

//go:noescape
func sumF32AVX2(p *float32, n int) float32

//go:noescape
func sumF32AVX512(p *float32, n int) float32

// pause executes PAUSE: it tells the core a spin-wait is in progress, which
// saves power and frees the sibling hyperthread.
func pause()

func archKernels() []kernel {
	var ks []kernel
	if cpu.X86.HasAVX512F {
		ks = append(ks, kernel{name: "avx512", f32: gemvF32AVX512, b16: gemvBF16AVX512, sum: sumF32AVX512})
	}
	if cpu.X86.HasAVX2 && cpu.X86.HasFMA {
		ks = append(ks, kernel{name: "avx2", f32: gemvF32AVX2, b16: gemvBF16AVX2, sum: sumF32AVX2})
	}
	return ks
}
