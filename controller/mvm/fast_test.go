package mvm

import (
	"fmt"
	"math"
	"math/rand/v2"
	"runtime"
	"testing"
	"time"
)

// oddShapes are rows×cols not multiples of any vector width or of the 4-row
// group, plus a few that are, so both the padded and the in-place x paths
// run, every column remainder path of the float32 kernels (a 32-column step,
// a 16-column step, a masked tail, each with and without the others) and
// both row passes (8 and 4 rows). 600×1000 float32 is larger than a huge
// page, so it is stored in its own mapping (see store).
var oddShapes = [][2]int{
	{1, 1}, {3, 17}, {7, 31}, {4, 32}, {33, 65}, {5, 96}, {129, 257}, {64, 64}, {250, 1001}, {2, 300},
	{8, 47}, {12, 48}, {9, 15}, {16, 16}, {17, 8}, {600, 1000},
}

func randomMatrix(rng *rand.Rand, rows, cols int) *Matrix {
	m, err := NewMatrix(rows, cols)
	if err != nil {
		panic(err)
	}
	for i := range m.Data {
		m.Data[i] = float32(rng.NormFloat64())
	}
	return m
}

func randomVector(rng *rand.Rand, n int) []float32 {
	v := make([]float32, n)
	for i := range v {
		v[i] = float32(rng.NormFloat64())
	}
	return v
}

// bf16Matrix returns a with every element rounded to bfloat16: the matrix a
// BFloat16 multiplier computes with, exactly.
func bf16Matrix(a *Matrix) *Matrix {
	r := &Matrix{Rows: a.Rows, Cols: a.Cols, Stride: a.Cols, Data: make([]float32, a.Rows*a.Cols)}
	for i := 0; i < a.Rows; i++ {
		for j, v := range a.Row(i) {
			r.Data[i*a.Cols+j] = widenBF16(roundBF16(v))
		}
	}
	return r
}

// absDot returns Σ|a_ij||x_j| over columns [c0, c1) of row i.
func absDot(a *Matrix, i int, x []float32, c0, c1 int) float64 {
	var s float64
	for j := c0; j < c1; j++ {
		s += math.Abs(float64(a.Row(i)[j]) * float64(x[j]))
	}
	return s
}

// closeTo reports whether two float32 sums of n products agree within what
// reordering can explain: each differs from the exact sum by at most
// γ_n·Σ|a||x|, γ_n = n·u/(1−n·u), u = 2^-24 (Higham, Accuracy and Stability
// of Numerical Algorithms, 2nd ed. (SIAM, 2002), eq. (3.5); *from memory*),
// so two of them differ by at most twice that. The accumulated y adds one
// more rounding of |y|.
func closeTo(got, want float32, n int, absSum, y float64) bool {
	const u = 1.0 / (1 << 24)
	g := float64(n+1) * u / (1 - float64(n+1)*u)
	return math.Abs(float64(got)-float64(want)) <= 2*g*(absSum+math.Abs(y))+1e-30
}

type variant struct {
	opts Options
	name string
}

func variants() []variant {
	var vs []variant
	for _, k := range Available() {
		for _, p := range []Precision{Float32, BFloat16} {
			for _, w := range []int{1, 2, 3} {
				vs = append(vs, variant{Options{Workers: w, Precision: p, Kernel: k}, fmt.Sprintf("%s-%s-%dw", k, p, w)})
			}
		}
	}
	return vs
}

func TestMulVecMatchesPlain(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	for _, v := range variants() {
		for _, sh := range oddShapes {
			t.Run(fmt.Sprintf("%s/%dx%d", v.name, sh[0], sh[1]), func(t *testing.T) {
				a := randomMatrix(rng, sh[0], sh[1])
				ref := a
				if v.opts.Precision == BFloat16 {
					ref = bf16Matrix(a)
				}
				m, err := New(a, v.opts)
				if err != nil {
					t.Fatal(err)
				}
				defer m.Close()
				x := randomVector(rng, sh[1])
				want := make([]float32, sh[0])
				NewPlain(ref).MulVec(want, x)
				// y sits in a longer buffer whose tail must survive: no kernel
				// writes past len(y).
				buf := make([]float32, sh[0]+8)
				for i := range buf {
					buf[i] = float32(math.NaN())
				}
				for i := sh[0]; i < len(buf); i++ {
					buf[i] = 12345
				}
				y := buf[:sh[0]]
				m.MulVec(y, x)
				for i := range y {
					if !closeTo(y[i], want[i], sh[1], absDot(ref, i, x, 0, sh[1]), 0) {
						t.Fatalf("y[%d] = %v, Plain gives %v", i, y[i], want[i])
					}
				}
				for i := sh[0]; i < len(buf); i++ {
					if buf[i] != 12345 {
						t.Fatalf("element %d past len(y) overwritten with %v", i-sh[0], buf[i])
					}
				}
			})
		}
	}
}

func TestMulVecColsMatchesPlain(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	for _, v := range variants() {
		for _, sh := range oddShapes {
			t.Run(fmt.Sprintf("%s/%dx%d", v.name, sh[0], sh[1]), func(t *testing.T) {
				rows, cols := sh[0], sh[1]
				a := randomMatrix(rng, rows, cols)
				ref := a
				if v.opts.Precision == BFloat16 {
					ref = bf16Matrix(a)
				}
				m, err := New(a, v.opts)
				if err != nil {
					t.Fatal(err)
				}
				defer m.Close()
				plain := NewPlain(ref)
				ranges := [][2]int{{0, 0}, {cols, cols}, {0, cols}, {0, 1}, {cols - 1, cols}}
				random := 12
				if rows*cols > 100_000 {
					random = 2 // the huge-page shape: its layout is the same, only its storage differs
				}
				for range random {
					c0 := rng.IntN(cols + 1)
					ranges = append(ranges, [2]int{c0, c0 + rng.IntN(cols-c0+1)})
				}
				for _, r := range ranges {
					x := randomVector(rng, cols)
					y0 := randomVector(rng, rows)
					want := append([]float32(nil), y0...)
					got := append([]float32(nil), y0...)
					plain.MulVecCols(want, x, r[0], r[1])
					m.MulVecCols(got, x, r[0], r[1])
					for i := range got {
						if r[0] == r[1] && got[i] != y0[i] {
							t.Fatalf("empty range [%d, %d): y[%d] changed from %v to %v", r[0], r[1], i, y0[i], got[i])
						}
						if !closeTo(got[i], want[i], r[1]-r[0], absDot(ref, i, x, r[0], r[1]), float64(y0[i])) {
							t.Fatalf("columns [%d, %d): y[%d] = %v, Plain gives %v", r[0], r[1], i, got[i], want[i])
						}
					}
				}
			})
		}
	}
}

// A pipelined product, chunk by chunk, equals the full product.
func TestChunkedEqualsFull(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 6))
	a := randomMatrix(rng, 301, 1000)
	m, err := New(a, Options{Workers: 2})
	if err != nil {
		t.Fatal(err)
	}
	defer m.Close()
	x := randomVector(rng, 1000)
	full := make([]float32, 301)
	m.MulVec(full, x)
	chunked := make([]float32, 301)
	for c := 0; c < 1000; c += 77 {
		m.MulVecCols(chunked, x, c, min(c+77, 1000))
	}
	for i := range full {
		if !closeTo(chunked[i], full[i], 1000, absDot(a, i, x, 0, 1000), 0) {
			t.Fatalf("y[%d]: chunked %v, full %v", i, chunked[i], full[i])
		}
	}
}

func TestNewRejects(t *testing.T) {
	good := &Matrix{Rows: 2, Cols: 3, Stride: 3, Data: make([]float32, 6)}
	nan := &Matrix{Rows: 2, Cols: 3, Stride: 3, Data: []float32{0, 0, 0, 0, float32(math.NaN()), 0}}
	inf := &Matrix{Rows: 1, Cols: 1, Stride: 1, Data: []float32{float32(math.Inf(-1))}}
	tests := []struct {
		name string
		a    *Matrix
		opts Options
	}{
		{"nil matrix", nil, Options{}},
		{"zero rows", &Matrix{Rows: 0, Cols: 3, Stride: 3}, Options{}},
		{"short stride", &Matrix{Rows: 2, Cols: 3, Stride: 2, Data: make([]float32, 6)}, Options{}},
		{"short data", &Matrix{Rows: 2, Cols: 3, Stride: 3, Data: make([]float32, 5)}, Options{}},
		{"NaN element", nan, Options{}},
		{"infinite element", inf, Options{}},
		{"negative workers", good, Options{Workers: -1}},
		{"too many workers", good, Options{Workers: maxWorkers + 1}},
		{"unknown precision", good, Options{Precision: 7}},
		{"unknown kernel", good, Options{Kernel: "sse9"}},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			m, err := New(tc.a, tc.opts)
			if err == nil {
				m.Close()
				t.Fatal("New accepted it")
			}
			if m != nil {
				t.Errorf("New returned a non-nil Multiplier with error %v", err)
			}
		})
	}
}

func TestForcedKernelIsUsed(t *testing.T) {
	a := randomMatrix(rand.New(rand.NewPCG(7, 8)), 8, 8)
	for _, k := range Available() {
		f, err := NewFast(a, Options{Kernel: k, Workers: 1})
		if err != nil {
			t.Fatal(err)
		}
		if f.Kernel() != k || f.Workers() != 1 {
			t.Errorf("forced %q, 1 worker: got %q, %d workers", k, f.Kernel(), f.Workers())
		}
		f.Close()
	}
}

func TestBFloat16Rounding(t *testing.T) {
	// bfloat16 is the top half of an IEEE binary32 (8 exponent bits, 8
	// significand bits); rounding is to nearest, ties to even (Kalamkar et al.,
	// "A Study of BFLOAT16 for Deep Learning Training", arXiv:1905.12322,
	// 2019; *from memory*).
	tests := []struct {
		in   float32
		want uint16
	}{
		{1, 0x3f80},
		{-2, 0xc000},
		{math.Float32frombits(0x3f808000), 0x3f80}, // tie, even stays
		{math.Float32frombits(0x3f818000), 0x3f82}, // tie, odd rounds up
		{math.Float32frombits(0x3f808001), 0x3f81}, // above the tie
		{math.MaxFloat32, 0x7f7f},                  // would round to +Inf
		{-math.MaxFloat32, 0xff7f},
		{0, 0},
	}
	for _, tc := range tests {
		t.Run(fmt.Sprint(tc.in), func(t *testing.T) {
			if got := roundBF16(tc.in); got != tc.want {
				t.Errorf("roundBF16(%v) = %#04x, want %#04x", tc.in, got, tc.want)
			}
		})
	}
}

func TestZeroAllocs(t *testing.T) {
	rng := rand.New(rand.NewPCG(9, 10))
	a := randomMatrix(rng, 333, 555)
	for _, v := range []Options{{Workers: 1}, {Workers: 2}, {Workers: 2, Precision: BFloat16}} {
		m, err := New(a, v)
		if err != nil {
			t.Fatal(err)
		}
		x, y := randomVector(rng, 555), make([]float32, 333)
		if n := testing.AllocsPerRun(100, func() { m.MulVec(y, x) }); n != 0 {
			t.Errorf("%+v: MulVec allocates %v times per call", v, n)
		}
		if n := testing.AllocsPerRun(100, func() { m.MulVecCols(y, x, 17, 300) }); n != 0 {
			t.Errorf("%+v: MulVecCols allocates %v times per call", v, n)
		}
		m.Close()
	}
}

// Workers that have gone through spinning, yielding and parking still take
// the next job, and Close ends every worker goroutine.
func TestPoolWakesAndCloses(t *testing.T) {
	before := runtime.NumGoroutine()
	rng := rand.New(rand.NewPCG(11, 12))
	a := randomMatrix(rng, 100, 64)
	m, err := New(a, Options{Workers: 3})
	if err != nil {
		t.Fatal(err)
	}
	x := randomVector(rng, 64)
	want, y := make([]float32, 100), make([]float32, 100)
	NewPlain(a).MulVec(want, x)
	for round := range 3 {
		time.Sleep(50 * time.Millisecond) // well past spinRounds+yieldRounds
		clear(y)
		m.MulVec(y, x)
		for i := range y {
			if !closeTo(y[i], want[i], 64, absDot(a, i, x, 0, 64), 0) {
				t.Fatalf("round %d after idling: y[%d] = %v, want %v", round, i, y[i], want[i])
			}
		}
	}
	m.Close()
	m.Close()
	deadline := time.Now().Add(2 * time.Second)
	for runtime.NumGoroutine() > before && time.Now().Before(deadline) {
		time.Sleep(time.Millisecond)
	}
	if g := runtime.NumGoroutine(); g > before {
		t.Errorf("%d goroutines after Close, %d before New", g, before)
	}
}

func TestSumKernels(t *testing.T) {
	rng := rand.New(rand.NewPCG(13, 14))
	v := randomVector(rng, 4*granule*37)
	var want float64
	for _, e := range v {
		want += float64(e)
	}
	for _, k := range kernels() {
		t.Run(k.name, func(t *testing.T) {
			got := k.sum(&v[0], len(v)/4)
			var abs float64
			for _, e := range v {
				abs += math.Abs(float64(e))
			}
			if !closeTo(got, float32(want), len(v), abs, 0) {
				t.Errorf("%s: sum %v, float64 sum %v", k.name, got, want)
			}
		})
	}
}

// The caller steals every block when no worker takes part: here the workers
// have exited (Close), which no caller may rely on, but a worker the OS has
// not scheduled looks the same to the caller.
func TestCallerStealsBlocks(t *testing.T) {
	rng := rand.New(rand.NewPCG(15, 16))
	a := randomMatrix(rng, 203, 150)
	f, err := NewFast(a, Options{Workers: 3})
	if err != nil {
		t.Fatal(err)
	}
	x := randomVector(rng, 150)
	want, y := make([]float32, 203), make([]float32, 203)
	NewPlain(a).MulVec(want, x)
	f.MulVec(y, x)
	f.Close()
	for round := range 2 {
		for i := range y {
			y[i] = float32(math.NaN())
		}
		f.MulVec(y, x)
		for i := range y {
			if !closeTo(y[i], want[i], 150, absDot(a, i, x, 0, 150), 0) {
				t.Fatalf("round %d without workers: y[%d] = %v, want %v", round, i, y[i], want[i])
			}
		}
	}
}
