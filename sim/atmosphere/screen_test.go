package atmosphere

import (
	"math"
	"math/cmplx"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/dsp/fourier"

	"stillsky/sim/optics"
)

// structure returns the mean phase structure function D(r) = ⟨(φ(x+r) − φ(x))²⟩ of
// count screens for integer lags 1..maxLag pixels, along rows and columns, using only
// pairs inside the screen (the screens with subharmonics are not periodic).
func structure(t testing.TB, c ScreenConfig, count, maxLag int, seed uint64) []float64 {
	g, err := NewScreenGenerator(c)
	if err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(seed, 1))
	n := c.Size
	s := make([]float64, n*n)
	d := make([]float64, maxLag+1)
	for k := 0; k < count; k++ {
		g.Generate(rng, s)
		for r := 1; r <= maxLag; r++ {
			var sum float64
			for y := 0; y < n; y++ {
				for x := 0; x+r < n; x++ {
					a := s[y*n+x+r] - s[y*n+x]
					b := s[x*n+y+r*n] - s[x*n+y]
					sum += a*a + b*b
				}
			}
			d[r] += sum / float64(2*n*(n-r)) / float64(count)
		}
	}
	return d
}

// Fried, JOSA 56 (1966) 1372; Noll, JOSA 66 (1976) 207: Kolmogorov phase structure
// function D(r) = 6.88 (r/r0)^(5/3), checked from 2 pixels to a tenth of the screen
// with an infinite outer scale, averaged over 40 screens of 256².
func TestStructureFunction(t *testing.T) {
	const n, r0 = 256, 8.0
	c := ScreenConfig{Size: n, PixelScale: 1, R0: r0, L0: math.Inf(1), Subharmonics: true}
	d := structure(t, c, 40, n/10, 1)
	worst := 0.0
	for r := 2; r <= n/10; r++ {
		want := 6.88 * math.Pow(float64(r)/r0, 5.0/3)
		rel := d[r]/want - 1
		worst = math.Max(worst, math.Abs(rel))
		if math.Abs(rel) > 0.10 {
			t.Errorf("D(%d px) = %.4g rad², want %.4g within 10%% (%.1f%%)", r, d[r], want, 100*rel)
		}
	}
	t.Logf("largest deviation from 6.88 (r/r0)^(5/3) over 2..%d px: %.1f%%", n/10, 100*worst)
}

// nollResiduals fits Zernike modes 1..J over a circular aperture of diameter ap
// pixels centred in each screen and returns Δ_J, the mean residual variance after
// removing the first J modes, in units of (D/r0)^(5/3) rad².
func nollResiduals(t testing.TB, c ScreenConfig, ap, count, J int, seed uint64) []float64 {
	g, err := NewScreenGenerator(c)
	if err != nil {
		t.Fatal(err)
	}
	p, err := optics.NewPupil(optics.PupilConfig{Diameter: float64(ap) * c.PixelScale, N: ap})
	if err != nil {
		t.Fatal(err)
	}
	// Gram–Schmidt on the sampled disk, so the projections are exact least squares.
	var basis [][]float64
	var in []int
	for i, a := range p.Mask {
		if a != 0 {
			in = append(in, i)
		}
	}
	z := make([]float64, ap*ap)
	for j := 1; j <= J; j++ {
		if err := optics.Zernike(j, p, z); err != nil {
			t.Fatal(err)
		}
		v := make([]float64, len(in))
		for k, i := range in {
			v[k] = z[i]
		}
		for _, b := range basis {
			d := dot(v, b)
			for k := range v {
				v[k] -= d * b[k]
			}
		}
		nv := math.Sqrt(dot(v, v))
		for k := range v {
			v[k] /= nv
		}
		basis = append(basis, v)
	}
	rng := rand.New(rand.NewPCG(seed, 2))
	n := c.Size
	s := make([]float64, n*n)
	w := make([]float64, len(in))
	delta := make([]float64, J+1)
	off := (n - ap) / 2
	for k := 0; k < count; k++ {
		g.Generate(rng, s)
		for m, i := range in {
			w[m] = s[(off+i/ap)*n+off+i%ap]
		}
		total := dot(w, w)
		for j := 1; j <= J; j++ {
			a := dot(w, basis[j-1])
			total -= a * a
			delta[j] += total / float64(len(in))
		}
	}
	scale := math.Pow(float64(ap)*c.PixelScale/c.R0, 5.0/3) * float64(count)
	for j := range delta {
		delta[j] /= scale
	}
	return delta
}

func dot(a, b []float64) float64 {
	var s float64
	for i := range a {
		s += a[i] * b[i]
	}
	return s
}

// nollTable is Δ_J of Noll, JOSA 66 (1976) 207, Table IV, in (D/r0)^(5/3) rad².
var nollTable = []float64{0, 1.0299, 0.582, 0.134, 0.111, 0.0880, 0.0648, 0.0587, 0.0525, 0.0463, 0.0401}

// Noll 1976, Table IV: residual variances after removing the first J Zernike modes,
// within 15% with subharmonics; without them the screen lacks the low frequencies
// (Lane, Glindemann & Dainty 1992) and Δ1..Δ3 come out low.
func TestNollResiduals(t *testing.T) {
	const n, ap = 64, 32
	c := ScreenConfig{Size: n, PixelScale: 1, R0: 4, L0: math.Inf(1), Subharmonics: true}
	with := nollResiduals(t, c, ap, 3000, 10, 3)
	c.Subharmonics = false
	without := nollResiduals(t, c, ap, 1000, 10, 4)
	for j := 1; j <= 10; j++ {
		rel := with[j]/nollTable[j] - 1
		t.Logf("Δ%-2d Noll %.4f  with subharmonics %.4f (%+.1f%%)  without %.4f (%+.1f%%)",
			j, nollTable[j], with[j], 100*rel, without[j], 100*(without[j]/nollTable[j]-1))
		if math.Abs(rel) > 0.15 {
			t.Errorf("Δ%d = %.4f, Noll %.4f: %.1f%% off (limit 15%%)", j, with[j], nollTable[j], 100*rel)
		}
	}
	if without[1] > 0.85*nollTable[1] {
		t.Errorf("without subharmonics Δ1 = %.3f, expected the FFT screen to lose low-order power (< 85%% of %.4f)", without[1], nollTable[1])
	}
}

func benchmarkGenerate(b *testing.B, n int) {
	g, err := NewScreenGenerator(ScreenConfig{Size: n, PixelScale: 0.0375, R0: 0.12, L0: 25, Subharmonics: true})
	if err != nil {
		b.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(1, 1))
	out := make([]float64, n*n)
	b.ReportAllocs()
	for b.Loop() {
		g.Generate(rng, out)
	}
}

func BenchmarkGenerate256(b *testing.B) { benchmarkGenerate(b, 256) }
func BenchmarkGenerate512(b *testing.B) { benchmarkGenerate(b, 512) }

func TestGenerateAllocatesNothing(t *testing.T) {
	g, err := NewScreenGenerator(ScreenConfig{Size: 48, PixelScale: 0.05, R0: 0.1, L0: 20, Subharmonics: true})
	if err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(1, 2))
	out := make([]float64, 48*48)
	if n := testing.AllocsPerRun(5, func() { g.Generate(rng, out) }); n != 0 {
		t.Errorf("%v allocations per screen, want 0", n)
	}
}

func TestNewScreenGeneratorRejects(t *testing.T) {
	good := ScreenConfig{Size: 64, PixelScale: 0.05, R0: 0.1, L0: 20}
	for name, f := range map[string]func(*ScreenConfig){
		"size 1":      func(c *ScreenConfig) { c.Size = 1 },
		"size huge":   func(c *ScreenConfig) { c.Size = 1 << 15 },
		"pixel 0":     func(c *ScreenConfig) { c.PixelScale = 0 },
		"pixel Inf":   func(c *ScreenConfig) { c.PixelScale = math.Inf(1) },
		"r0 negative": func(c *ScreenConfig) { c.R0 = -1 },
		"L0 NaN":      func(c *ScreenConfig) { c.L0 = math.NaN() },
		"L0 zero":     func(c *ScreenConfig) { c.L0 = 0 },
	} {
		t.Run(name, func(t *testing.T) {
			c := good
			f(&c)
			if _, err := NewScreenGenerator(c); err == nil {
				t.Errorf("%s: accepted %+v", name, c)
			}
		})
	}
}

// fourierShift returns the band-limited periodic field of the n×n samples z at the
// grid points shifted by (sx, sy) samples: z(x) = Σ_k C_k exp(−2πi k·x/n), so the
// shifted field has the coefficients C_k·exp(−2πi k·s/n), k signed in (−n/2, n/2]
// (the DFT shift theorem), computed with gonum's FFT.
func fourierShift(z []complex128, n int, sx, sy float64) []complex128 {
	f := fourier.NewCmplxFFT(n)
	c := append([]complex128(nil), z...)
	col := make([]complex128, n)
	both := func(apply func([]complex128)) {
		for y := 0; y < n; y++ {
			apply(c[y*n : (y+1)*n])
		}
		for x := 0; x < n; x++ {
			for y := 0; y < n; y++ {
				col[y] = c[y*n+x]
			}
			apply(col)
			for y := 0; y < n; y++ {
				c[y*n+x] = col[y]
			}
		}
	}
	both(func(v []complex128) { f.Sequence(v, v) })
	signed := func(k int) float64 {
		if k > n/2 {
			k -= n
		}
		return float64(k)
	}
	for ky := 0; ky < n; ky++ {
		for kx := 0; kx < n; kx++ {
			s, cs := math.Sincos(-2 * math.Pi * (signed(kx)*sx + signed(ky)*sy) / float64(n))
			c[ky*n+kx] *= complex(cs, s) / complex(float64(n*n), 0)
		}
	}
	both(func(v []complex128) { f.Coefficients(v, v) })
	return c
}

// The planes of a layer's screens are its band-limited field at the half-sample
// offsets, with the periodic extension: each plane, real and imaginary parts,
// against the Fourier shift of the first plane computed with gonum's FFT.
func TestPlanesAreTheShiftedField(t *testing.T) {
	const n, ext = 48, 8
	g, err := NewScreenGenerator(ScreenConfig{Size: n, PixelScale: 0.05, R0: 0.1, L0: 20})
	if err != nil {
		t.Fatal(err)
	}
	stride := n + ext
	re, im := make([]float32, phases*stride*stride), make([]float32, phases*stride*stride)
	j := job{work: make([]complex128, n*n), spec: make([]complex128, n*n), rng: rand.New(rand.NewPCG(3, 4)), re: re, im: im, ext: ext}
	for !g.step(&j, 7) { // in small slices, as a layer does
	}
	z := make([]complex128, n*n)
	var rms float64
	for y := 0; y < n; y++ {
		for x := 0; x < n; x++ {
			z[y*n+x] = complex(float64(re[y*stride+x]), float64(im[y*stride+x]))
			rms += real(z[y*n+x]*cmplx.Conj(z[y*n+x])) / float64(n*n)
		}
	}
	rms = math.Sqrt(rms)
	for plane := 1; plane < phases; plane++ {
		want := fourierShift(z, n, float64(plane%2)/2, float64(plane/2)/2)
		base := plane * stride * stride
		worst := 0.0
		for y := 0; y < stride; y++ {
			for x := 0; x < stride; x++ {
				got := complex(float64(re[base+y*stride+x]), float64(im[base+y*stride+x]))
				worst = math.Max(worst, cmplx.Abs(got-want[(y%n)*n+x%n]))
			}
		}
		t.Logf("plane %d: largest difference %.2g of the screen's rms", plane, worst/rms)
		if worst > 1e-5*rms {
			t.Errorf("plane %d differs from the Fourier shift by %.3g (screen rms %.3g)", plane, worst, rms)
		}
	}
}
