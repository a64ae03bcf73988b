package mvm

import (
	"fmt"
	"math"
	"runtime"
	"unsafe"
)

// Precision is the storage format of the matrix inside a Fast multiplier.
// Arithmetic is always float32; only the stored elements are narrowed.
type Precision int

const (
	// Float32 stores the matrix as given.
	Float32 Precision = iota
	// BFloat16 stores each element as a bfloat16 (the top 16 bits of a float32,
	// rounded to nearest even), halving the bytes read per product. The kernel
	// widens each element back to float32 exactly, so the only error is the
	// rounding of the matrix: a relative error of at most 2^-8 per element.
	BFloat16
)

// String returns "float32" or "bfloat16".
func (p Precision) String() string {
	switch p {
	case Float32:
		return "float32"
	case BFloat16:
		return "bfloat16"
	}
	return fmt.Sprintf("Precision(%d)", int(p))
}

// elemSize returns the bytes stored per matrix element.
func (p Precision) elemSize() int {
	if p == BFloat16 {
		return 2
	}
	return 4
}

// Options selects how New builds a multiplier. The zero value picks everything
// automatically.
type Options struct {
	// Workers is the number of threads sharing each product, the calling
	// goroutine included: 1 runs on the caller alone, n > 1 starts n-1 worker
	// goroutines. 0 chooses by matrix size (see AutoWorkers).
	Workers int
	// Precision of the stored matrix: Float32 (default) or BFloat16.
	Precision Precision
	// Kernel forces an inner loop: "plain" (pure Go), "avx2" (AVX2 and FMA) or
	// "avx512" (AVX-512F). "" picks the fastest one the CPU supports. Forcing a
	// kernel the CPU or the build lacks is an error.
	Kernel string
}

// granule is the column block of the stored bfloat16 matrix, in elements:
// one 64-byte line of 32 elements (see packBF16). bfloat16 rows are padded
// to whole granules, and column ranges off that grid are multiplied through
// a copy of x that is zero outside the range.
const granule = 32

// align is the byte alignment of every stored row and of the x scratch buffer:
// one cache line, so whole-matrix products never split a line.
const align = 64

// lineFloats is the column padding of a stored float32 row: one cache line.
// The float32 kernels need no padding (they mask the last partial vector),
// but with every row starting on a line no load of a whole-matrix product
// splits a line, for at most part of one line per row more than unpadded
// rows read (0.5 % at 1300×2500; padding to 32 columns read 1.1 %).
const lineFloats = align / 4

// Fast is the multiplier New returns: the matrix copied into a padded,
// cache-line-aligned layout, one inner-loop kernel, and optionally a pool of
// worker goroutines that split the rows.
//
// A Fast is not safe for concurrent use: one goroutine calls MulVec and
// MulVecCols at a time. Its worker goroutines live until Close.
type Fast struct {
	rows, cols int
	prec       Precision
	kern       kernel
	stride     int // stored elements per row: a multiple of lineFloats (float32) or granule (bfloat16)
	f32        []float32
	b16        []uint16
	xs         []float32 // bfloat16 only: x padded with zeros outside the requested columns
	workers    int       // participants, the caller included
	per        int       // row blocks owned by each participant
	parts      []rowSpan // row blocks; participant p owns [p·per, (p+1)·per)
	tails      [][16]float32
	job        job
	pool       *pool
}

type rowSpan struct{ lo, hi int }

// job is the product in progress, written by the caller before it publishes
// the job to the workers (see pool).
type job struct {
	y   []float32
	x   *float32 // first element of the x block (padded, for bfloat16)
	j0  int      // first stored column of the block (a multiple of granule for bfloat16)
	n   int      // columns in the block (a multiple of granule for bfloat16)
	add bool
}

// New copies a into the layout of the fastest kernel allowed by opts and
// returns a multiplier for it. The matrix must have finite elements: the
// kernels pad ranges of columns with zeros in x, and 0·Inf would not vanish.
// The result must be released with Close when it has worker goroutines.
func New(a *Matrix, opts Options) (Multiplier, error) {
	f, err := NewFast(a, opts)
	if err != nil {
		return nil, err // not a Multiplier holding a nil *Fast
	}
	return f, nil
}

// NewFast is New with the concrete type, for callers that want to report the
// kernel and worker count chosen.
func NewFast(a *Matrix, opts Options) (*Fast, error) {
	if err := validate(a); err != nil {
		return nil, err
	}
	if opts.Precision != Float32 && opts.Precision != BFloat16 {
		return nil, fmt.Errorf("mvm: options precision %d: must be Float32 or BFloat16", int(opts.Precision))
	}
	if opts.Workers < 0 || opts.Workers > maxWorkers {
		return nil, fmt.Errorf("mvm: options workers %d: must be in [0, %d]", opts.Workers, maxWorkers)
	}
	k, err := pickKernel(opts.Kernel)
	if err != nil {
		return nil, err
	}
	f := &Fast{rows: a.Rows, cols: a.Cols, prec: opts.Precision, kern: k}
	paddedRows := roundUp(a.Rows, 4)
	if f.prec == BFloat16 {
		f.stride = roundUp(a.Cols, granule)
		f.b16 = unsafe.Slice((*uint16)(store(f, 2*paddedRows*f.stride)), paddedRows*f.stride)
		packBF16(f.b16, f.stride, a)
		f.xs = alignedFloat32(f.stride)
	} else {
		f.stride = roundUp(a.Cols, lineFloats)
		f.f32 = unsafe.Slice((*float32)(store(f, 4*paddedRows*f.stride)), paddedRows*f.stride)
		for i := 0; i < a.Rows; i++ {
			copy(f.f32[i*f.stride:], a.Row(i))
		}
	}
	w := opts.Workers
	if w == 0 {
		w = AutoWorkers(a.Rows, a.Cols, f.prec)
	}
	f.split(w)
	if f.workers > 1 {
		f.pool = startPool(f, f.workers-1)
	}
	return f, nil
}

// maxWorkers bounds Options.Workers; more threads than rows/4 are never used.
const maxWorkers = 256

// parallelBytes is the smallest stored matrix (bytes) that AutoWorkers splits
// across threads: about one core's L2. Below it the product takes a few µs
// at most and the hand-off (a cache-line round trip, and on a loaded machine
// the wait until the OS runs both threads at once) costs more than the
// second core saves. Measured by alternating 1 and 2 workers on a shared
// 2-core guest: from 32 KB to 1 MB two threads were never faster than one;
// at 5.4 MB (850×1600) and above they were 1.6–2.1× faster when the machine
// was quiet.
const parallelBytes = 2 << 20

// AutoWorkers returns the thread count New uses when Options.Workers is 0:
// one below parallelBytes of stored matrix, else every thread GOMAXPROCS
// allows.
func AutoWorkers(rows, cols int, p Precision) int {
	if rows*cols*p.elemSize() < parallelBytes {
		return 1
	}
	return max(1, runtime.GOMAXPROCS(0))
}

func validate(a *Matrix) error {
	if a == nil {
		return fmt.Errorf("mvm: matrix: must not be nil")
	}
	if a.Rows <= 0 || a.Cols <= 0 {
		return fmt.Errorf("mvm: matrix shape %d×%d: both dimensions must be positive", a.Rows, a.Cols)
	}
	if a.Stride < a.Cols {
		return fmt.Errorf("mvm: matrix stride %d: must be >= cols %d", a.Stride, a.Cols)
	}
	if need := (a.Rows-1)*a.Stride + a.Cols; len(a.Data) < need {
		return fmt.Errorf("mvm: matrix data length %d: must be >= %d for %d×%d with stride %d", len(a.Data), need, a.Rows, a.Cols, a.Stride)
	}
	for i := 0; i < a.Rows; i++ {
		for j, v := range a.Row(i) {
			if math.IsNaN(float64(v)) || math.IsInf(float64(v), 0) {
				return fmt.Errorf("mvm: matrix element (%d, %d) = %v: must be finite", i, j, v)
			}
		}
	}
	return nil
}

// sharesPer is how many row blocks each participant owns. More than one lets
// a participant that starts late still take part: the others steal its
// blocks from the far end.
const sharesPer = 4

// split assigns rows to w participants: each owns sharesPer contiguous
// blocks (fewer for small matrices) of whole 4-row groups, as even as the
// groups allow. Participants that would get no rows are dropped.
func (f *Fast) split(w int) {
	groups := (f.rows + 3) / 4
	f.workers = max(1, min(w, groups))
	f.per = max(1, min(sharesPer, groups/f.workers))
	if f.workers == 1 {
		f.per = 1
	}
	n := f.workers * f.per
	f.parts = make([]rowSpan, n)
	f.tails = make([][16]float32, n)
	lo := 0
	for i := range n {
		g := groups / n
		if i < groups%n {
			g++
		}
		hi := min(lo+4*g, f.rows)
		f.parts[i] = rowSpan{lo, hi}
		lo = hi
	}
}

// Rows returns the number of rows of A.
func (f *Fast) Rows() int { return f.rows }

// Cols returns the number of columns of A.
func (f *Fast) Cols() int { return f.cols }

// Kernel returns the name of the inner loop in use: "plain", "avx2" or "avx512".
func (f *Fast) Kernel() string { return f.kern.name }

// Workers returns the number of threads sharing each product, the caller included.
func (f *Fast) Workers() int { return f.workers }

// Precision returns the storage format of the matrix.
func (f *Fast) Precision() Precision { return f.prec }

// MulVec stores y = A·x. It panics unless len(y) == Rows() and len(x) == Cols().
func (f *Fast) MulVec(y, x []float32) {
	f.check(y, x, 0, f.cols)
	f.run(y, x, 0, f.cols, false)
}

// MulVecCols adds A[:, c0:c1]·x[c0:c1] into y. It panics unless len(y) == Rows(),
// len(x) == Cols() and 0 <= c0 <= c1 <= Cols().
func (f *Fast) MulVecCols(y, x []float32, c0, c1 int) {
	f.check(y, x, c0, c1)
	if c0 == c1 {
		return
	}
	f.run(y, x, c0, c1, true)
}

func (f *Fast) check(y, x []float32, c0, c1 int) {
	if len(y) != f.rows || len(x) != f.cols {
		panic(fmt.Sprintf("mvm: shape mismatch: A is %d×%d, len(y)=%d, len(x)=%d", f.rows, f.cols, len(y), len(x)))
	}
	if c0 < 0 || c0 > c1 || c1 > f.cols {
		panic(fmt.Sprintf("mvm: column range [%d, %d) outside [0, %d)", c0, c1, f.cols))
	}
}

// run multiplies columns [c0, c1) into y. The float32 kernels take any
// range and read x in place. The bfloat16 kernels work in whole granules, so
// the range is widened to them and x copied into one that is zero outside
// [c0, c1), unless the range is already whole granules.
func (f *Fast) run(y, x []float32, c0, c1 int, add bool) {
	f.job = job{y: y, x: &x[c0], j0: c0, n: c1 - c0, add: add}
	if f.prec == BFloat16 {
		j0 := c0 &^ (granule - 1)
		j1 := roundUp(c1, granule)
		if c0 != j0 || c1 != j1 {
			xs := f.xs[j0:j1]
			clear(xs[:c0-j0])
			copy(xs[c0-j0:], x[c0:c1])
			clear(xs[c1-j0:])
			f.job.x = &xs[0]
		}
		f.job.j0, f.job.n = j0, j1-j0
	}
	if f.pool == nil {
		f.part(0)
	} else {
		f.pool.run(f)
	}
	// The stored matrix may be a mapping released by a cleanup on f (see
	// store): f must stay reachable until the kernels are done with it.
	runtime.KeepAlive(f)
}

// part computes row block p of the current job.
func (f *Fast) part(p int) {
	s := f.parts[p]
	j := &f.job
	byteStride := uintptr(f.stride * f.prec.elemSize())
	full := (s.hi - s.lo) / 4
	if full > 0 {
		f.kern.gemv(f.prec, f.at(s.lo, j.j0), byteStride, full, j.x, j.n, &j.y[s.lo], j.add)
	}
	r := s.lo + 4*full
	if r == s.hi {
		return
	}
	// The last group is short: the stored matrix has zero rows up to a
	// multiple of 4, so compute 4 rows into a scratch and keep the real ones.
	t := &f.tails[p]
	k := s.hi - r
	if j.add {
		copy(t[:k], j.y[r:s.hi])
	}
	f.kern.gemv(f.prec, f.at(r, j.j0), byteStride, 1, j.x, j.n, &t[0], j.add)
	copy(j.y[r:s.hi], t[:k])
}

// at returns the address of stored element (i, j).
func (f *Fast) at(i, j int) unsafe.Pointer {
	if f.prec == BFloat16 {
		return unsafe.Pointer(&f.b16[i*f.stride+j])
	}
	return unsafe.Pointer(&f.f32[i*f.stride+j])
}

// Close stops the worker goroutines. It is safe to call more than once.
func (f *Fast) Close() {
	if f.pool != nil {
		f.pool.close()
	}
}

func roundUp(n, m int) int { return (n + m - 1) / m * m }

func alignedFloat32(n int) []float32 {
	buf := make([]float32, n+align/4)
	off := int(uintptr(unsafe.Pointer(&buf[0]))%align) / 4
	if off != 0 {
		off = align/4 - off
	}
	return buf[off : off+n : off+n]
}

// alignedBytes returns n zero bytes starting on a cache line.
func alignedBytes(n int) unsafe.Pointer {
	buf := make([]byte, n+align)
	off := (align - int(uintptr(unsafe.Pointer(&buf[0]))%align)) % align
	return unsafe.Pointer(&buf[off])
}
