//go:build openblas

package openblasbench

import (
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"sort"
	"syscall"
	"testing"
	"time"

	"stillsky/controller/mvm"
)

// timeoutEnv bounds how long idle OpenBLAS threads keep spinning (with
// sched_yield) for the next call: 2^v cycles, 2^28 (~0.1 s) by default,
// read once when the library loads. Left at the default, OpenBLAS's idle
// threads would still be spinning through our block after its own and take
// our worker's core. 2^20 cycles (~0.4 ms) is the order of our own workers'
// spin bound and far longer than the gap between back-to-back calls, so
// OpenBLAS's timed calls are not slowed.
const timeoutEnv = "OPENBLAS_THREAD_TIMEOUT"

// TestMain re-executes the test binary with timeoutEnv set, since the
// library reads it before any Go code runs.
func TestMain(m *testing.M) {
	if os.Getenv(timeoutEnv) == "" {
		os.Setenv(timeoutEnv, "20")
		if exe, err := os.Executable(); err == nil {
			err = syscall.Exec(exe, os.Args, os.Environ())
			fmt.Fprintf(os.Stderr, "openblasbench: re-exec with %s=20: %v; OpenBLAS keeps its default spin\n", timeoutEnv, err)
		}
	}
	os.Exit(m.Run())
}

// Sizes of mvm.BenchmarkMVM: rows × columns, float32.
var shapes = [][2]int{{850, 1600}, {1300, 2500}, {3300, 6400}}

func setup(rows, cols int) (*mvm.Matrix, []float32) {
	rng := rand.New(rand.NewPCG(1, 1))
	a, err := mvm.NewMatrix(rows, cols)
	if err != nil {
		panic(err)
	}
	for i := range a.Data {
		a.Data[i] = float32(rng.NormFloat64())
	}
	x := make([]float32, cols)
	for i := range x {
		x[i] = float32(rng.NormFloat64())
	}
	return a, x
}

// The products must agree before their speeds are compared.
func TestSgemvAgrees(t *testing.T) {
	a, x := setup(333, 517)
	want, got := make([]float32, 333), make([]float32, 333)
	mvm.NewPlain(a).MulVec(want, x)
	for _, threads := range []int{1, 2} {
		SetThreads(threads)
		Sgemv(got, a.Data, 333, 517, x)
		for i := range got {
			// float32 dot products of 517 terms in different orders agree to
			// a few 1e-5 relative of Σ|a||x| (Higham 2002, eq. (3.5); *from memory*).
			if d := math.Abs(float64(got[i] - want[i])); d > 1e-3 {
				t.Fatalf("%d threads: y[%d] = %v, Plain gives %v", threads, i, got[i], want[i])
			}
		}
	}
}

// blockTime is the length of one uninterrupted run of one implementation;
// gap lets the other side's spinning helper threads go idle first.
const (
	blockTime = 10 * time.Millisecond
	gap       = 3 * time.Millisecond
)

// BenchmarkVsOpenBLAS alternates blocks of our MVM and of cblas_sgemv with
// the same thread count, so both see the same machine load, and reports each
// one's mean time per product and the throughput ratio ours/openblas (> 1:
// ours is faster): from the means, from each side's fastest block (load only
// ever adds time), and as the median over rounds of the ratio of the two
// adjacent blocks (-paired: a burst of load that hits one round moves one
// sample, not the estimate). Quote the median over -count 5 or more.
func BenchmarkVsOpenBLAS(b *testing.B) {
	for _, sh := range shapes {
		rows, cols := sh[0], sh[1]
		a, x := setup(rows, cols)
		for _, threads := range []int{1, 2} {
			b.Run(fmt.Sprintf("%dx%d/%dt", rows, cols, threads), func(b *testing.B) {
				ours, err := mvm.NewFast(a, mvm.Options{Workers: threads})
				if err != nil {
					b.Fatal(err)
				}
				defer ours.Close()
				y := make([]float32, rows)
				arms := []func(){
					func() { ours.MulVec(y, x) },
					func() { SetThreads(threads); Sgemv(y, a.Data, rows, cols, x) },
				}
				var spent [2]time.Duration
				var best [2]float64
				var paired []float64 // per round: openblas block time / ours
				calls := 0
				t0 := time.Now()
				arms[0]()
				block := max(1, int(blockTime/max(time.Since(t0), time.Microsecond)))
				b.ResetTimer()
				for calls < b.N {
					k := min(block, b.N-calls)
					var round [2]time.Duration
					for i, run := range arms {
						b.StopTimer()
						time.Sleep(gap)
						run() // refill the caches with this side's matrix
						b.StartTimer()
						start := time.Now()
						for range k {
							run()
						}
						d := time.Since(start)
						spent[i] += d
						round[i] = d
						if per := float64(d.Nanoseconds()) / float64(k); best[i] == 0 || per < best[i] {
							best[i] = per
						}
					}
					paired = append(paired, float64(round[1])/float64(round[0]))
					calls += k
				}
				oursNs := float64(spent[0].Nanoseconds()) / float64(calls)
				blasNs := float64(spent[1].Nanoseconds()) / float64(calls)
				b.ReportMetric(oursNs, "ours-ns/op")
				b.ReportMetric(blasNs, "openblas-ns/op")
				b.ReportMetric(blasNs/oursNs, "ours/openblas")
				b.ReportMetric(best[1]/best[0], "ours/openblas-best")
				b.ReportMetric(median(paired), "ours/openblas-paired")
				b.ReportMetric(float64(rows*cols*4)/best[0], "ours-best-GB/s")
				b.Logf("kernel %s, %d workers", ours.Kernel(), ours.Workers())
			})
		}
	}
}

// median returns the middle value of v (the mean of the two middle values
// for an even count); v is reordered.
func median(v []float64) float64 {
	if len(v) == 0 {
		return math.NaN()
	}
	sort.Float64s(v)
	m := len(v) / 2
	if len(v)%2 == 0 {
		return (v[m-1] + v[m]) / 2
	}
	return v[m]
}
