package mvm

import (
	"fmt"
	"math/rand/v2"
	"sync"
	"testing"
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

// BenchmarkReadBandwidth is a STREAM-style read: the sum of a float32 array
// with the fastest kernel's streaming loop, on 1 and 2 threads. The 84MB case
// has the byte count of the 3300×6400 float32 matrix, so its bytes/s is the
// ceiling of BenchmarkMVM/3300x6400 in the same run; 512MB is larger than any
// cache of this machine.
func BenchmarkReadBandwidth(b *testing.B) {
	k := kernels()[0]
	for _, mb := range []int{84, 512} {
		n := roundUp(mb<<20/4, 64*2)
		data := alignedFloat32(n)
		for i := range data {
			data[i] = 1
		}
		for _, w := range []int{1, 2} {
			b.Run(fmt.Sprintf("%dMB-%dw", mb, w), func(b *testing.B) {
				b.SetBytes(int64(4 * n))
				part := n / w
				var wg sync.WaitGroup
				sums := make([]float32, w)
				for b.Loop() {
					wg.Add(w - 1)
					for i := 1; i < w; i++ {
						go func() {
							sums[i] = k.sum(&data[i*part], part)
							wg.Done()
						}()
					}
					sums[0] = k.sum(&data[0], part)
					wg.Wait()
				}
				if sums[0] != float32(part) && part < 1<<24 {
					b.Fatalf("sum %v, want %d", sums[0], part)
				}
			})
		}
	}
}
