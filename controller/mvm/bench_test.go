package mvm

import (
	"fmt"
	"math/rand/v2"
	"sync"
	"testing"
	"time"
	"unsafe"
)

// benchShapes are the rows×cols of BenchmarkMVM: control matrices of roughly
// 30×30, 40×40 and 64×64-subaperture systems (actuators × slopes).
var benchShapes = [][2]int{{850, 1600}, {1300, 2500}, {3300, 6400}}

type benchVariant struct {
	name string
	opts Options
}

// benchVariants lists plain, every SIMD kernel at 1 and 2 threads, and
// bfloat16 with the default kernel.
func benchVariants() []benchVariant {
	vs := []benchVariant{{"plain", Options{Kernel: "plain", Workers: 1}}}
	for _, k := range Available() {
		if k == "plain" {
			continue
		}
		for _, w := range []int{1, 2} {
			vs = append(vs, benchVariant{fmt.Sprintf("%s-%dw", k, w), Options{Kernel: k, Workers: w}})
		}
	}
	for _, w := range []int{1, 2} {
		vs = append(vs, benchVariant{fmt.Sprintf("bf16-%dw", w), Options{Precision: BFloat16, Workers: w}})
	}
	return append(vs, benchVariant{"auto", Options{}})
}

// BenchmarkMVM reports y = A·x throughput; bytes/s counts the stored matrix
// (rows·cols·element size), the traffic that bounds the product.
func BenchmarkMVM(b *testing.B) {
	rng := rand.New(rand.NewPCG(1, 1))
	for _, sh := range benchShapes {
		rows, cols := sh[0], sh[1]
		a := randomMatrix(rng, rows, cols)
		x, y := randomVector(rng, cols), make([]float32, rows)
		b.Run(fmt.Sprintf("%dx%d", rows, cols), func(b *testing.B) {
			for _, v := range benchVariants() {
				b.Run(v.name, func(b *testing.B) {
					m, err := NewFast(a, v.opts)
					if err != nil {
						b.Fatal(err)
					}
					defer m.Close()
					b.SetBytes(int64(rows * cols * m.Precision().elemSize()))
					m.MulVec(y, x)
					b.ResetTimer()
					for b.Loop() {
						m.MulVec(y, x)
					}
				})
			}
		})
	}
}

// reader sums a float32 array split across w goroutines with the fastest
// kernel's streaming loop, four streams per thread: a STREAM-style read (McCalpin, "Memory Bandwidth
// and Machine Balance in Current High Performance Computers", IEEE TCCA
// Newsletter, 1995; *from memory*), reduced to its read half.
type reader struct {
	data []float32 // in store's memory, like a stored matrix
	w    int
	sums []float32
	wg   sync.WaitGroup
	sum  func(p *float32, n int) float32
}

func newReader(bytes, w int) *reader {
	n := roundUp(bytes/4, 4*granule*w)
	r := &reader{w: w, sums: make([]float32, w), sum: kernels()[0].sum}
	r.data = unsafe.Slice((*float32)(store(r, 4*n)), n)
	for i := range r.data {
		r.data[i] = 1
	}
	return r
}

func (r *reader) read() {
	part := len(r.data) / r.w
	r.wg.Add(r.w - 1)
	for i := 1; i < r.w; i++ {
		go func() {
			r.sums[i] = r.sum(&r.data[i*part], part/4)
			r.wg.Done()
		}()
	}
	r.sums[0] = r.sum(&r.data[0], part/4)
	r.wg.Wait()
}

// BenchmarkReadBandwidth is the read-bandwidth yardstick on 1 and 2 threads.
// The 84MB case has the byte count of the 3300×6400 float32 matrix; 512MB is
// larger than any cache of this machine.
func BenchmarkReadBandwidth(b *testing.B) {
	for _, mb := range []int{84, 512} {
		for _, w := range []int{1, 2} {
			b.Run(fmt.Sprintf("%dMB-%dw", mb, w), func(b *testing.B) {
				r := newReader(mb<<20, w)
				b.SetBytes(int64(4 * len(r.data)))
				for b.Loop() {
					r.read()
				}
				if want := float32(len(r.data) / w); r.sums[0] != want && want < 1<<24 {
					b.Fatalf("sum %v, want %v", r.sums[0], want)
				}
			})
		}
	}
}

// alternate runs the arms in turn, in blocks of about blockTime each after a
// gap that lets the previous arm's spinning threads park and one untimed call
// that refills the caches, until each arm has run b.N times. It returns each
// arm's mean time per call and its fastest block's time per call.
// Alternating keeps a noisy, shared machine from favouring whichever arm ran
// in a quiet moment; on a loaded machine the fastest block is the better
// estimate, since load only ever adds time.
func alternate(b *testing.B, arms ...func()) (mean, best []float64) {
	const (
		blockTime = 10 * time.Millisecond
		gap       = 3 * time.Millisecond
	)
	t0 := time.Now()
	arms[0]()
	block := max(1, int(blockTime/max(time.Since(t0), time.Microsecond)))
	spent := make([]time.Duration, len(arms))
	best = make([]float64, len(arms))
	b.ResetTimer()
	for calls := 0; calls < b.N; {
		k := min(block, b.N-calls)
		for i, run := range arms {
			b.StopTimer()
			time.Sleep(gap)
			run()
			b.StartTimer()
			start := time.Now()
			for range k {
				run()
			}
			d := time.Since(start)
			spent[i] += d
			if per := float64(d.Nanoseconds()) / float64(k); best[i] == 0 || per < best[i] {
				best[i] = per
			}
		}
		calls += k
	}
	mean = make([]float64, len(arms))
	for i, d := range spent {
		mean[i] = float64(d.Nanoseconds()) / float64(b.N)
	}
	return mean, best
}

// BenchmarkMVMvsRead alternates the float32 product with the fastest kernel
// and a read of an array of the same byte count, on the same threads, and
// reports the ratio of their throughputs: the fraction of the achievable read
// bandwidth the product reaches.
func BenchmarkMVMvsRead(b *testing.B) {
	rng := rand.New(rand.NewPCG(2, 2))
	for _, sh := range benchShapes {
		rows, cols := sh[0], sh[1]
		a := randomMatrix(rng, rows, cols)
		x, y := randomVector(rng, cols), make([]float32, rows)
		for _, w := range []int{1, 2} {
			b.Run(fmt.Sprintf("%dx%d/%dw", rows, cols, w), func(b *testing.B) {
				m, err := New(a, Options{Workers: w})
				if err != nil {
					b.Fatal(err)
				}
				defer m.Close()
				r := newReader(rows*cols*4, w)
				mean, best := alternate(b, func() { m.MulVec(y, x) }, r.read)
				mvmBytes, readBytes := float64(rows*cols*4), float64(4*len(r.data))
				b.ReportMetric(mvmBytes/mean[0], "mvm-GB/s")
				b.ReportMetric(readBytes/mean[1], "read-GB/s")
				b.ReportMetric(mvmBytes/mean[0]/(readBytes/mean[1]), "mvm/read")
				b.ReportMetric(mvmBytes/best[0]/(readBytes/best[1]), "mvm/read-best")
			})
		}
	}
}

// BenchmarkMVMChunked alternates the whole product with the same product
// taken in column chunks of odd width (MulVecCols, as a frame read out chunk
// by chunk is multiplied), on the default kernel and threads, and reports
// the chunked throughput relative to the whole (1: chunking costs nothing).
func BenchmarkMVMChunked(b *testing.B) {
	rng := rand.New(rand.NewPCG(3, 3))
	for _, sh := range benchShapes {
		rows, cols := sh[0], sh[1]
		a := randomMatrix(rng, rows, cols)
		x, y := randomVector(rng, cols), make([]float32, rows)
		const chunks = 10
		width := cols/chunks + 1 // not a multiple of any vector width for these shapes
		b.Run(fmt.Sprintf("%dx%d/%dchunks", rows, cols, chunks), func(b *testing.B) {
			m, err := New(a, Options{})
			if err != nil {
				b.Fatal(err)
			}
			defer m.Close()
			chunked := func() {
				clear(y)
				for c := 0; c < cols; c += width {
					m.MulVecCols(y, x, c, min(c+width, cols))
				}
			}
			mean, best := alternate(b, func() { m.MulVec(y, x) }, chunked)
			b.ReportMetric(mean[0]/mean[1], "chunked/whole")
			b.ReportMetric(best[0]/best[1], "chunked/whole-best")
		})
	}
}
