package controller

import (
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// TestSymEigenAgainstGonum checks symEigen against gonum's EigenSym (the
// reference implementation of LAPACK's Dsyev): the same eigenvalues, A·V = V·Λ
// and VᵀV = I, on random matrices, on one with a repeated eigenvalue and on a
// normal matrix MᵀM whose spectrum spans twelve decades.
func TestSymEigenAgainstGonum(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	randomSym := func(n int) *mat.SymDense {
		a := mat.NewSymDense(n, nil)
		for i := 0; i < n; i++ {
			for j := i; j < n; j++ {
				a.SetSym(i, j, rng.NormFloat64())
			}
		}
		return a
	}
	// Q·diag(λ)·Qᵀ with λ = 1, 1, 1, 2, 3, … for a cluster of three.
	repeated := func(n int) *mat.SymDense {
		var qr mat.QR
		qr.Factorize(mat.NewDense(n, n, randSlice(rng, n*n)))
		var q mat.Dense
		qr.QTo(&q)
		l := mat.NewDiagDense(n, nil)
		for i := 0; i < n; i++ {
			l.SetDiag(i, float64(max(1, i-1)))
		}
		var ql, a mat.Dense
		ql.Mul(&q, l)
		a.Mul(&ql, q.T())
		s := mat.NewSymDense(n, nil)
		for i := 0; i < n; i++ {
			for j := i; j < n; j++ {
				s.SetSym(i, j, (a.At(i, j)+a.At(j, i))/2)
			}
		}
		return s
	}
	graded := func(n int) *mat.SymDense {
		m := mat.NewDense(2*n, n, randSlice(rng, 2*n*n))
		for j := 0; j < n; j++ {
			for i := 0; i < 2*n; i++ {
				m.Set(i, j, m.At(i, j)*math.Pow(10, -6*float64(j)/float64(n)))
			}
		}
		var s mat.SymDense
		s.SymOuterK(1, m.T())
		return &s
	}
	for _, tc := range []struct {
		name string
		a    *mat.SymDense
	}{
		{"random 1", randomSym(1)},
		{"random 2", randomSym(2)},
		{"random 37", randomSym(37)},
		{"random 300", randomSym(300)},
		{"repeated 120", repeated(120)},
		{"graded normal 200", graded(200)},
	} {
		t.Run(tc.name, func(t *testing.T) {
			n := tc.a.SymmetricDim()
			buf := make([]float64, n*n)
			for i := 0; i < n; i++ {
				for j := 0; j < n; j++ {
					buf[i*n+j] = tc.a.At(i, j)
				}
			}
			var calls int
			last := 0.0
			vals, vec, err := symEigen(buf, n, func(done float64) {
				if done < last {
					t.Errorf("progress went back from %g to %g", last, done)
				}
				last = done
				calls++
			})
			if err != nil {
				t.Fatal(err)
			}
			var ref mat.EigenSym
			if !ref.Factorize(tc.a, false) {
				t.Fatal("gonum EigenSym did not converge")
			}
			rv := ref.Values(nil) // ascending
			scale := math.Max(math.Abs(rv[0]), math.Abs(rv[n-1]))
			for i := range vals {
				if d := math.Abs(vals[i] - rv[n-1-i]); d > 1e-12*scale {
					t.Fatalf("eigenvalue %d = %g, gonum %g", i, vals[i], rv[n-1-i])
				}
			}
			var av, vl mat.Dense
			av.Mul(tc.a, vec)
			vl.Mul(vec, mat.NewDiagDense(n, vals))
			av.Sub(&av, &vl)
			if r := mat.Norm(&av, 2); r > 1e-11*scale {
				t.Errorf("‖A·V − V·Λ‖₂ = %g (‖A‖ = %g)", r, scale)
			}
			var vtv mat.Dense
			vtv.Mul(vec.T(), vec)
			for i := 0; i < n; i++ {
				vtv.Set(i, i, vtv.At(i, i)-1)
			}
			if r := mat.Norm(&vtv, math.Inf(1)); r > 1e-11 {
				t.Errorf("‖VᵀV − I‖∞ = %g", r)
			}
			if n > 1 && calls == 0 {
				t.Error("no progress reported")
			}
		})
	}
}

func randSlice(rng *rand.Rand, n int) []float64 {
	s := make([]float64, n)
	for i := range s {
		s[i] = rng.NormFloat64()
	}
	return s
}
