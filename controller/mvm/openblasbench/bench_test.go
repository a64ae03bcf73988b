//go:build openblas

package openblasbench

import (
	"fmt"
	"math"
	"math/rand/v2"
	"testing"
	"time"

	"stillsky/controller/mvm"
)

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
	blockTime = 50 * time.Millisecond
	gap       = 10 * time.Millisecond
)

// BenchmarkVsOpenBLAS alternates blocks of our MVM and of cblas_sgemv with
// the same thread count, so both see the same machine load, and reports each
// one's time per product and their throughput ratio ours/openblas (> 1: ours
// is faster). Quote the median over -count 5 or more.
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
				calls := 0
				t0 := time.Now()
				arms[0]()
				block := max(1, int(blockTime/max(time.Since(t0), time.Microsecond)))
				b.ResetTimer()
				for calls < b.N {
					k := min(block, b.N-calls)
					for i, run := range arms {
						b.StopTimer()
						time.Sleep(gap)
						run() // refill the caches with this side's matrix
						b.StartTimer()
						start := time.Now()
						for range k {
							run()
						}
						spent[i] += time.Since(start)
					}
					calls += k
				}
				oursNs := float64(spent[0].Nanoseconds()) / float64(calls)
				blasNs := float64(spent[1].Nanoseconds()) / float64(calls)
				b.ReportMetric(oursNs, "ours-ns/op")
				b.ReportMetric(blasNs, "openblas-ns/op")
				b.ReportMetric(blasNs/oursNs, "ours/openblas")
				b.ReportMetric(float64(rows*cols*4)/oursNs, "ours-GB/s")
				b.Logf("kernel %s, %d workers", ours.Kernel(), ours.Workers())
			})
		}
	}
}
