package atmosphere

import (
	"math"
	"math/rand/v2"
	"testing"
)

// TestInterpKernels holds the assembly inner loops to the portable ones on
// fresh random rows of odd lengths, with the outputs beyond the row poisoned
// so that a kernel writing past its end is caught. Both compute the same
// products in a different order (the assembly fuses multiply and add), so
// they agree to a few float rounding steps, not bit for bit.
func TestInterpKernels(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 6))
	row := func(n int) []float32 {
		v := make([]float32, n)
		for i := range v {
			v[i] = float32(rng.NormFloat64() * 10)
		}
		return v
	}
	for _, n := range []int{1, 3, 7, 8, 9, 31, 97, 161, 257} {
		var src [6][]float32
		var cw [6]float32
		for m := range src {
			src[m] = row(n)
			cw[m] = float32(rng.NormFloat64())
		}
		for _, add := range []bool{false, true} {
			base := row(n)
			got := make([]float32, n+3)
			copy(got, base)
			for i := n; i < len(got); i++ {
				got[i] = float32(math.NaN())
			}
			want := append([]float32(nil), base...)
			combine6(got[:n], add, src, cw)
			combine6Go(want, add, src, cw)
			for i := range want {
				if d := math.Abs(float64(got[i] - want[i])); d > 1e-5*(1+math.Abs(float64(want[i]))) {
					t.Fatalf("combine6 n=%d add=%v [%d]: %g, portable %g", n, add, i, got[i], want[i])
				}
			}
			for i := n; i < len(got); i++ {
				if !math.IsNaN(float64(got[i])) {
					t.Fatalf("combine6 n=%d wrote element %d beyond the row", n, i)
				}
			}
		}
		even, odd := row(n+2), row(n+2)
		out := make([]float64, n+3)
		ref := make([]float64, n)
		for i := range out {
			out[i] = float64(i)
			if i >= n {
				out[i] = math.NaN()
			}
		}
		for i := range ref {
			ref[i] = float64(i)
		}
		ta, tb := [3]float64{0.1, -0.7, 0.25}, [3]float64{0.6, 0.05, -0.3}
		taps6Add(out[:n], even, odd, ta, tb)
		taps6AddGo(ref, even, odd, ta, tb)
		for i := range ref {
			if d := math.Abs(out[i] - ref[i]); d > 1e-12*(1+math.Abs(ref[i])) {
				t.Fatalf("taps6Add n=%d [%d]: %g, portable %g", n, i, out[i], ref[i])
			}
		}
		for i := n; i < len(out); i++ {
			if !math.IsNaN(out[i]) {
				t.Fatalf("taps6Add n=%d wrote element %d beyond the row", n, i)
			}
		}
		var x [6][]float64
		var c [6]float64
		for j := range x {
			x[j] = make([]float64, n)
			for i := range x[j] {
				x[j][i] = rng.NormFloat64()
			}
			c[j] = rng.NormFloat64()
		}
		for _, add := range []bool{false, true} {
			copy(out, ref)
			for i := n; i < len(out); i++ {
				out[i] = math.NaN()
			}
			want := append([]float64(nil), ref...)
			waves6(out[:n], add, 0.25, x, c)
			waves6Go(want, add, 0.25, x, c)
			for i := range want {
				if d := math.Abs(out[i] - want[i]); d > 1e-12*(1+math.Abs(want[i])) {
					t.Fatalf("waves6 n=%d add=%v [%d]: %g, portable %g", n, add, i, out[i], want[i])
				}
			}
			for i := n; i < len(out); i++ {
				if !math.IsNaN(out[i]) {
					t.Fatalf("waves6 n=%d wrote element %d beyond the row", n, i)
				}
			}
		}
	}
}
