package optics

import (
	"math"
	"testing"
)

// TestContrastAiry checks the contrast curve of an unaberrated circular pupil
// against the Airy pattern I(r)/I₀ = [2 J₁(πr)/(πr)]², r in λ/D (Born & Wolf,
// Principles of Optics), averaged over the same annuli by numerical
// integration: ∫ I(ρ) ρ dρ / ∫ ρ dρ over [r − ½, r + ½).
func TestContrastAiry(t *testing.T) {
	const n, pad = 128, 8
	p := disk(t, n)
	im, err := NewImager(p, 1e-6, pad)
	if err != nil {
		t.Fatal(err)
	}
	m := im.Size()
	psf := make([]float64, m*m)
	im.PSF(make([]float64, n*n), psf)
	out := make([]float64, 100)
	got, err := Contrast(psf, m, pad, out)
	if err != nil {
		t.Fatal(err)
	}
	if want := n / 2; got != want { // ⌊m/(2·pad) − ½⌋ + 1 with m = pad·n
		t.Fatalf("%d separations written, want %d", got, want)
	}
	airy := func(r float64) float64 {
		if r == 0 {
			return 1
		}
		x := math.Pi * r
		return math.Pow(2*math.J1(x)/x, 2)
	}
	for r := 1; r <= 20; r++ {
		lo, hi := float64(r)-0.5, float64(r)+0.5
		const steps = 2000
		num, den := 0.0, 0.0
		for i := range steps {
			rho := lo + (hi-lo)*(float64(i)+0.5)/steps
			num += airy(rho) * rho
			den += rho
		}
		want := num / den
		// The pupil is sampled on 128 points across and the annulus on pixels of
		// λ/(8D): 10 % covers both at the contrasts of the first 20 λ/D, 15 % in
		// the first annulus, whose inner edge cuts the steep side of the core.
		tol := 0.1
		if r == 1 {
			tol = 0.15
		}
		if d := math.Abs(out[r]-want) / want; d > tol {
			t.Errorf("contrast at %d λ/D: %.3g, Airy %.3g (%.0f%% off)", r, out[r], want, 100*d)
		}
	}
	if math.Abs(out[0]-1) > 0.5 || out[0] < out[1] {
		t.Errorf("core annulus %.3g, first ring %.3g", out[0], out[1])
	}
}

func TestContrastRejects(t *testing.T) {
	out := make([]float64, 4)
	for _, c := range []struct {
		name string
		psf  []float64
		size int
		pad  int
	}{
		{"wrong length", make([]float64, 15), 4, 2},
		{"zero pad", make([]float64, 16), 4, 0},
		{"dark", make([]float64, 16), 4, 2},
		{"NaN peak", []float64{math.Inf(1), 0, 0, 0}, 2, 1},
	} {
		t.Run(c.name, func(t *testing.T) {
			if _, err := Contrast(c.psf, c.size, c.pad, out); err == nil {
				t.Errorf("%s: accepted", c.name)
			}
		})
	}
}
