package mvm

import (
	"fmt"
	"math"
	"unsafe"
)

// gemvFunc is the contract of every inner loop. For g in [0, groups) and r in
// [0, 4) it computes s = Σ_{j<n} A(4g+r, j)·x[j] and stores y[4g+r] = s, or
// adds s to y[4g+r] when add is set. a is the stored element (0, 0) of the
// block and stride the byte distance between stored rows; x holds n
// elements, and no kernel reads x outside them. For float32 (kernel.f32) n is
// any positive count and a any element of a row; for bfloat16 (kernel.b16) a
// is 64-byte aligned and n is a positive multiple of granule.
type gemvFunc func(a unsafe.Pointer, stride uintptr, groups int, x *float32, n int, y *float32, add bool)

// kernel is one instruction-set variant, for each storage precision.
type kernel struct {
	name string
	f32  gemvFunc
	b16  gemvFunc
	// sum returns Σ p[i] for i < 4n, n a positive multiple of 32, read as
	// four concurrent streams of n elements like the four rows of a gemv
	// group: the yardstick of the read-bandwidth benchmark.
	sum func(p *float32, n int) float32
}

func (k kernel) gemv(p Precision, a unsafe.Pointer, stride uintptr, groups int, x *float32, n int, y *float32, add bool) {
	if p == BFloat16 {
		k.b16(a, stride, groups, x, n, y, add)
		return
	}
	k.f32(a, stride, groups, x, n, y, add)
}

var plainKernel = kernel{name: "plain", f32: gemvF32Go, b16: gemvBF16Go, sum: sumF32Go}

// kernelNames lists every kernel this package knows, whether or not the CPU
// and the build support it.
var kernelNames = []string{"plain", "avx2", "avx512"}

// Available returns the kernels usable on this CPU and build, fastest first;
// "plain" is always last.
func Available() []string {
	var names []string
	for _, k := range kernels() {
		names = append(names, k.name)
	}
	return names
}

func kernels() []kernel {
	return append(archKernels(), plainKernel)
}

func pickKernel(name string) (kernel, error) {
	ks := kernels()
	if name == "" {
		return ks[0], nil
	}
	for _, k := range ks {
		if k.name == name {
			return k, nil
		}
	}
	for _, n := range kernelNames {
		if n == name {
			return kernel{}, fmt.Errorf("mvm: options kernel %q: not supported by this CPU or build (available: %v)", name, Available())
		}
	}
	return kernel{}, fmt.Errorf("mvm: options kernel %q: unknown (known: %v)", name, kernelNames)
}

// gemvF32Go is the pure-Go inner loop on the float32 layout; it sums in the
// same order as Plain.
func gemvF32Go(a unsafe.Pointer, stride uintptr, groups int, x *float32, n int, y *float32, add bool) {
	xs := unsafe.Slice(x, n)
	ys := unsafe.Slice(y, 4*groups)
	for i := range ys {
		s := dot(unsafe.Slice((*float32)(unsafe.Add(a, uintptr(i)*stride)), n), xs)
		if add {
			ys[i] += s
		} else {
			ys[i] = s
		}
	}
}

func sumF32Go(p *float32, n int) float32 {
	var s float32
	for _, v := range unsafe.Slice(p, 4*n) {
		s += v
	}
	return s
}

// gemvBF16Go is the pure-Go inner loop on the bfloat16 block layout (see packBF16).
func gemvBF16Go(a unsafe.Pointer, stride uintptr, groups int, x *float32, n int, y *float32, add bool) {
	xs := unsafe.Slice(x, n)
	ys := unsafe.Slice(y, 4*groups)
	for i := range ys {
		row := unsafe.Slice((*uint16)(unsafe.Add(a, uintptr(i)*stride)), n)
		var s float32
		for b := 0; b < n; b += granule {
			blk, xb := row[b:b+granule], xs[b:b+granule]
			for k := range granule / 2 {
				s += widenBF16(blk[2*k])*xb[k] + widenBF16(blk[2*k+1])*xb[granule/2+k]
			}
		}
		if add {
			ys[i] += s
		} else {
			ys[i] = s
		}
	}
}

// packBF16 stores a in blocks of 32 columns, one 64-byte cache line per block
// and row. In block b, 32-bit word k holds column 32b+k in its low half and
// column 32b+16+k in its high half, so a kernel widens a whole line with one
// shift (low halves) and one mask (high halves) instead of a cross-lane
// unpack. Padding columns are zero.
func packBF16(dst []uint16, stride int, a *Matrix) {
	for i := 0; i < a.Rows; i++ {
		row := dst[i*stride : (i+1)*stride]
		for j, v := range a.Row(i) {
			row[bf16Index(j)] = roundBF16(v)
		}
	}
}

// bf16Index returns the position of column j within a stored bfloat16 row.
func bf16Index(j int) int {
	b, w := j/granule*granule, j%granule
	return b + 2*(w%(granule/2)) + w/(granule/2)
}

// roundBF16 rounds v to the nearest bfloat16, ties to even. A finite v that
// would round to infinity is truncated to the largest bfloat16 of its sign
// instead, so a finite matrix stays finite.
func roundBF16(v float32) uint16 {
	b := math.Float32bits(v)
	r := uint16((b + 0x7fff + (b>>16)&1) >> 16)
	if r&0x7f80 == 0x7f80 && b&0x7f800000 != 0x7f800000 {
		return uint16(b >> 16)
	}
	return r
}

// widenBF16 returns the float32 whose top half is h; it is exact.
func widenBF16(h uint16) float32 { return math.Float32frombits(uint32(h) << 16) }
