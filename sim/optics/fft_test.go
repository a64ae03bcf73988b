package optics

import (
	"math"
	"math/cmplx"
	"math/rand/v2"
	"strconv"
	"testing"

	"gonum.org/v1/gonum/dsp/fourier"
)

// The Stockham plan agrees with gonum's FFTPACK port (the reference) for sizes made
// of every radix, their mixtures, and sizes that fall back to gonum.
func TestPlanMatchesGonum(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 6))
	for _, n := range []int{1, 2, 3, 4, 5, 6, 7, 8, 9, 12, 16, 25, 30, 49, 64, 96, 105, 192, 243, 256, 384, 500, 11, 22, 26} {
		x := make([]complex128, n)
		for i := range x {
			x[i] = complex(rng.NormFloat64(), rng.NormFloat64())
		}
		want := fourier.NewCmplxFFT(n).Coefficients(nil, x)
		got := append([]complex128(nil), x...)
		newPlan(n).transform(got)
		worst := 0.0
		for i := range got {
			worst = math.Max(worst, cmplx.Abs(got[i]-want[i]))
		}
		if worst > 1e-12*float64(n) {
			t.Errorf("n = %d: largest difference from gonum %.3g", n, worst)
		}
	}
}

// The 2-D transform of a single plane wave is a single spike (DFT shift theorem).
func TestFFT2PlaneWave(t *testing.T) {
	const n, kx, ky = 24, 5, 19
	f, err := NewFFT2(n)
	if err != nil {
		t.Fatal(err)
	}
	d := make([]complex128, n*n)
	for y := 0; y < n; y++ {
		for x := 0; x < n; x++ {
			d[y*n+x] = cmplx.Rect(1, 2*math.Pi*float64(kx*x+ky*y)/n)
		}
	}
	f.Transform(d, n)
	for i, v := range d {
		want := 0.0
		if i == ky*n+kx {
			want = n * n
		}
		if cmplx.Abs(v-complex(want, 0)) > 1e-9 {
			t.Fatalf("bin %d = %v, want %g", i, v, want)
		}
	}
}

func benchmarkFFT1D(b *testing.B, n int, ours bool) {
	x := make([]complex128, n)
	for i := range x {
		x[i] = complex(float64(i%7), 1)
	}
	p, g := newPlan(n), fourier.NewCmplxFFT(n)
	for b.Loop() {
		if ours {
			p.transform(x)
		} else {
			g.Coefficients(x, x)
		}
	}
}

// BenchmarkFFT1D compares the plan with gonum in the same process at the sizes of
// the default scenario's imager (192) and screens (384).
func BenchmarkFFT1D(b *testing.B) {
	for _, n := range []int{192, 384} {
		b.Run("stockham/"+strconv.Itoa(n), func(b *testing.B) { benchmarkFFT1D(b, n, true) })
		b.Run("gonum/"+strconv.Itoa(n), func(b *testing.B) { benchmarkFFT1D(b, n, false) })
	}
}
