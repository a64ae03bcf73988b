package controller

import (
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/blas"
	"gonum.org/v1/gonum/blas/blas64"
	"gonum.org/v1/gonum/lapack/lapack64"
)

// randomBandFactor returns the upper band Cholesky factor of a random
// diagonally dominant symmetric band matrix of size n and bandwidth k.
func randomBandFactor(rng *rand.Rand, n, k int) blas64.TriangularBand {
	data := make([]float64, n*(k+1))
	for i := range n {
		data[i*(k+1)] = float64(2 * k)
		for j := 1; j <= k && i+j < n; j++ {
			data[i*(k+1)+j] = rng.Float64() - 0.5
		}
	}
	t, ok := lapack64.Pbtrf(blas64.SymmetricBand{Uplo: blas.Upper, N: n, K: k, Stride: k + 1, Data: data})
	if !ok {
		panic("not positive definite")
	}
	return t
}

// TestBandSolveAgainstTbsv checks the blocked bandSolve against gonum's
// Tbsv applied to each column, both transposes, for bandwidths below, at and
// above the block size.
func TestBandSolveAgainstTbsv(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	for _, k := range []int{3, bandBlock, 2*bandBlock + 5} {
		for _, tr := range []blas.Transpose{blas.Trans, blas.NoTrans} {
			const n, m = 200, 7
			u := randomBandFactor(rng, n, k)
			x := make([]float64, n*m)
			for i := range x {
				x[i] = rng.NormFloat64()
			}
			want := append([]float64(nil), x...)
			for c := range m {
				blas64.Tbsv(tr, u, blas64.Vector{N: n, Inc: m, Data: want[c:]})
			}
			bandSolve(u, tr, x, m)
			for i := range x {
				if d := x[i] - want[i]; d > 1e-12 || d < -1e-12 {
					t.Fatalf("bandwidth %d, transpose %v: entry %d = %g, Tbsv %g", k, tr, i, x[i], want[i])
				}
			}
		}
	}
}

// BenchmarkBandSolve times the blocked bandSolve against one gonum Tbsv per
// right-hand side, n = 1500, bandwidth 200, n right-hand sides (the xao
// metric is n = 3365, bandwidth 327).
func BenchmarkBandSolve(b *testing.B) {
	const n, k = 1500, 200
	u := randomBandFactor(rand.New(rand.NewPCG(1, 2)), n, k)
	x := make([]float64, n*n)
	for _, bc := range []struct {
		name  string
		solve func()
	}{
		{"blocked", func() { bandSolve(u, blas.Trans, x, n) }},
		{"tbsv", func() {
			for r := range n {
				blas64.Tbsv(blas.Trans, u, blas64.Vector{N: n, Inc: 1, Data: x[r*n : (r+1)*n]})
			}
		}},
	} {
		b.Run(bc.name, func(b *testing.B) {
			for range b.N {
				for i := range x {
					x[i] = 1
				}
				bc.solve()
			}
		})
	}
}
