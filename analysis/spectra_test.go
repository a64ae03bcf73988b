package analysis

import (
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/stat"
)

func TestPSDWhiteAndAR1(t *testing.T) {
	// White noise of variance σ² sampled at F has the flat one-sided density
	// 2σ²/F, and the integral of any density is the variance (Parseval).
	rng := rand.New(rand.NewPCG(1, 2))
	const n, rate = 1 << 16, 1000.0
	x := make([]float64, n)
	for i := range x {
		x[i] = 2 * rng.NormFloat64()
	}
	s, err := PSD(x, rate, 256)
	if err != nil {
		t.Fatal(err)
	}
	total := 0.0
	for i := 1; i < len(s.Power)-1; i++ {
		total += s.Power[i] * (s.Freq[1] - s.Freq[0])
	}
	if v := stat.Variance(x, nil); math.Abs(total/v-1) > 0.03 {
		t.Errorf("integral of the PSD %.4f, variance of the series %.4f (gonum stat)", total, v)
	}
	// An AR(1) process y_k = a y_{k−1} + e_k has the density
	// (2σ_e²/F) / |1 − a e^{−jω}|² (standard time-series result): compare at mid-band.
	const a = 0.9
	y := make([]float64, n)
	for i := 1; i < n; i++ {
		y[i] = a*y[i-1] + rng.NormFloat64()
	}
	s, _ = PSD(y, rate, 512)
	for _, k := range []int{20, 60, 128} {
		w := 2 * math.Pi * s.Freq[k] / rate
		want := 2 / rate / (1 - 2*a*math.Cos(w) + a*a)
		if math.Abs(s.Power[k]/want-1) > 0.15 {
			t.Errorf("AR(1) PSD at %.1f Hz: %.4g, want %.4g", s.Freq[k], s.Power[k], want)
		}
	}
	if _, err := PSD(x[:100], rate, 256); err == nil {
		t.Error("a series shorter than a segment was accepted")
	}
}

func TestProjectorMatchesPseudoOpenLoop(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	m := mat.NewDense(6, 3, nil)
	p := mat.NewDense(2, 6, nil)
	for i := range 6 {
		for j := range 3 {
			m.Set(i, j, rng.NormFloat64())
		}
		p.Set(0, i, rng.NormFloat64())
		p.Set(1, i, rng.NormFloat64())
	}
	s := []float32{1, -2, 0.5, 3, 0, 1}
	c := []float32{0.2, -0.1, 0.4}
	pol := make([]float64, 6)
	PseudoOpenLoop(m, s, c, pol)
	var want mat.VecDense
	want.MulVec(p, mat.NewVecDense(6, pol))
	q, err := NewProjector(p, m)
	if err != nil {
		t.Fatal(err)
	}
	got := make([]float64, 2)
	q.Coefficients(s, c, got)
	for i := range got {
		if math.Abs(got[i]-want.AtVec(i)) > 1e-6 {
			t.Errorf("coefficient %d: %g, want P·(s − M·c) = %g", i, got[i], want.AtVec(i))
		}
	}
}
