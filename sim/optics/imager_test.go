package optics

import (
	"fmt"
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/stat"
)

// airy returns the radial cut of the unaberrated PSF along +x from its centre, in
// pixels of λ/(pad·D).
func airy(t *testing.T, n, pad int) ([]float64, *Imager) {
	t.Helper()
	p := disk(t, n)
	im, err := NewImager(p, 1e-6, pad)
	if err != nil {
		t.Fatal(err)
	}
	m := im.Size()
	psf := make([]float64, m*m)
	im.PSF(make([]float64, n*n), psf)
	cut := psf[(m/2)*m+m/2 : (m/2+1)*m]
	return cut, im
}

// Born & Wolf, Principles of Optics (Airy pattern): for an unobstructed circular
// pupil the first dark ring is at 1.22 λ/D and the FWHM is ≈ 1.03 λ/D.
func TestAiryPattern(t *testing.T) {
	const pad = 8
	cut, im := airy(t, 128, pad)
	if math.Abs(cut[0]-1) > 1e-12 {
		t.Errorf("unaberrated peak %g, want 1 by normalisation", cut[0])
	}
	if s := im.Strehl(make([]float64, 128*128)); math.Abs(s-1) > 1e-12 {
		t.Errorf("unaberrated Strehl %g, want 1", s)
	}
	// First minimum: the amplitude changes sign there, so fit a parabola to the
	// signed amplitude √I at the two samples before and the two after the lowest one
	// (least squares), and take its root between them.
	k := 1
	for cut[k+1] < cut[k] {
		k++
	}
	var xs, ys []float64
	for _, i := range []int{k - 2, k - 1, k + 1, k + 2} {
		a := math.Sqrt(cut[i])
		if i > k {
			a = -a
		}
		xs, ys = append(xs, float64(i-k)), append(ys, a)
	}
	zero := (float64(k) + parabolaRoot(xs, ys)) / pad
	// Half maximum, by linear interpolation.
	h := 0
	for cut[h+1] > 0.5 {
		h++
	}
	half := (float64(h) + (cut[h]-0.5)/(cut[h]-cut[h+1])) / pad
	t.Logf("first zero %.4f λ/D, FWHM %.4f λ/D", zero, 2*half)
	if math.Abs(zero-1.22)/1.22 > 0.01 {
		t.Errorf("first zero at %.4f λ/D, want 1.22 within 1%%", zero)
	}
	if math.Abs(2*half-1.03)/1.03 > 0.01 {
		t.Errorf("FWHM %.4f λ/D, want 1.03 within 1%%", 2*half)
	}
}

// Parseval's theorem: Σ|FT|² = M² Σ|field|², so the PSF normalised to the
// diffraction-limited peak sums to M²/(clear samples) whatever the aberration.
func TestPSFEnergy(t *testing.T) {
	p := disk(t, 32)
	im, err := NewImager(p, 1e-6, 2)
	if err != nil {
		t.Fatal(err)
	}
	opd := make([]float64, 32*32)
	rng := rand.New(rand.NewPCG(1, 2))
	for i := range opd {
		opd[i] = rng.NormFloat64() * 3e-7
	}
	m := im.Size()
	psf := make([]float64, m*m)
	im.PSF(opd, psf)
	var sum float64
	for _, v := range psf {
		sum += v
	}
	if want := float64(m*m) / p.Area; math.Abs(sum-want)/want > 1e-10 {
		t.Errorf("PSF sum %g, want %g", sum, want)
	}
}

// Mahajan, JOSA 73 (1983) 860: the Maréchal approximation S ≈ exp(−σ²) holds to a
// few per cent for σ < 0.3 rad; the FFT Strehl of random mixes of low-order
// Zernike modes (no tilt, which only moves the peak) agrees within 2%.
func TestMarechal(t *testing.T) {
	const n, lambda = 64, 1.65e-6
	p := disk(t, n)
	im, err := NewImager(p, lambda, 4)
	if err != nil {
		t.Fatal(err)
	}
	modes := make([][]float64, 16)
	for j := 4; j < 16; j++ {
		modes[j] = make([]float64, n*n)
		if err := Zernike(j, p, modes[j]); err != nil {
			t.Fatal(err)
		}
	}
	rng := rand.New(rand.NewPCG(7, 11))
	opd := make([]float64, n*n)
	worst := 0.0
	for _, sigma := range []float64{0.05, 0.1, 0.15, 0.2, 0.25, 0.3} {
		for trial := 0; trial < 4; trial++ {
			clear(opd)
			for j := 4; j < 16; j++ {
				c := rng.NormFloat64()
				for i := range opd {
					opd[i] += c * modes[j][i]
				}
			}
			scale := sigma / ResidualRMS(p, opd) * lambda / (2 * math.Pi)
			for i := range opd {
				opd[i] *= scale
			}
			s := im.Strehl(opd)
			want := math.Exp(-sigma * sigma)
			rel := math.Abs(s-want) / want
			worst = math.Max(worst, rel)
			if rel > 0.02 {
				t.Errorf("σ = %.2f rad: FFT Strehl %.4f, Maréchal %.4f (%.2f%% apart)", sigma, s, want, 100*rel)
			}
		}
	}
	t.Logf("largest FFT/Maréchal difference: %.2f%%", 100*worst)
}

// The residual rms equals the population standard deviation over the mask
// (gonum stat.PopStdDev) and ignores piston.
func TestResidualRMS(t *testing.T) {
	p, err := NewPupil(PupilConfig{Diameter: 4, Obstruction: 0.3, N: 48})
	if err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(3, 4))
	opd := make([]float64, 48*48)
	var in []float64
	for i := range opd {
		opd[i] = 5e-6 + rng.NormFloat64()*1e-8
		if p.Mask[i] != 0 {
			in = append(in, opd[i])
		}
	}
	got, want := ResidualRMS(p, opd), stat.PopStdDev(in, nil)
	if math.Abs(got-want) > 1e-12*want {
		t.Errorf("ResidualRMS %g, gonum PopStdDev %g", got, want)
	}
}

func TestImagerAllocatesNothing(t *testing.T) {
	p := disk(t, 24)
	im, err := NewImager(p, 1e-6, 2)
	if err != nil {
		t.Fatal(err)
	}
	opd := make([]float64, 24*24)
	psf := make([]float64, im.Size()*im.Size())
	if a := testing.AllocsPerRun(5, func() { im.PSF(opd, psf); im.Strehl(opd) }); a != 0 {
		t.Errorf("%v allocations per PSF+Strehl, want 0", a)
	}
}

func TestNewImagerRejects(t *testing.T) {
	p := disk(t, 8)
	for _, c := range []struct {
		lambda float64
		pad    int
	}{{0, 2}, {math.NaN(), 2}, {1e-6, 0}, {1e-6, 17}} {
		t.Run(fmt.Sprintf("lambda=%g pad=%d", c.lambda, c.pad), func(t *testing.T) {
			if _, err := NewImager(p, c.lambda, c.pad); err == nil {
				t.Errorf("NewImager(λ=%g, pad=%d) accepted", c.lambda, c.pad)
			}
		})
	}
}

// BenchmarkStrehl is the default scenario's science camera: 96 samples across,
// padding 2.
func BenchmarkStrehl(b *testing.B) {
	p, err := NewPupil(PupilConfig{Diameter: 3.6, Obstruction: 0.12, N: 96})
	if err != nil {
		b.Fatal(err)
	}
	im, err := NewImager(p, 1.65e-6, 2)
	if err != nil {
		b.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(1, 1))
	opd := make([]float64, 96*96)
	for i := range opd {
		opd[i] = rng.NormFloat64() * 1e-7
	}
	b.ReportAllocs()
	for b.Loop() {
		im.Strehl(opd)
	}
}

// parabolaRoot fits y = c0 + c1 x + c2 x² to the points by least squares (gonum's
// QR solve) and returns its root nearest x = 0.
func parabolaRoot(xs, ys []float64) float64 {
	a := mat.NewDense(len(xs), 3, nil)
	for i, x := range xs {
		a.SetRow(i, []float64{1, x, x * x})
	}
	var c mat.VecDense
	if err := c.SolveVec(a, mat.NewVecDense(len(ys), ys)); err != nil {
		panic(err)
	}
	c0, c1, c2 := c.AtVec(0), c.AtVec(1), c.AtVec(2)
	disc := math.Sqrt(c1*c1 - 4*c2*c0)
	r1, r2 := (-c1+disc)/(2*c2), (-c1-disc)/(2*c2)
	if math.Abs(r1) < math.Abs(r2) {
		return r1
	}
	return r2
}
