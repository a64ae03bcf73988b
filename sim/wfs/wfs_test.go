package wfs

import (
	"fmt"
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/dsp/fourier"

	"stillsky/sim/optics"
)

const (
	lambdaGS = 7e-7 // guide-star wavelength, m
	diameter = 3.6
	nSub     = 24
)

func pupil(t testing.TB, samples int, obstruction float64, spiders int) *optics.Pupil {
	t.Helper()
	p, err := optics.NewPupil(optics.PupilConfig{Diameter: diameter, Obstruction: obstruction,
		Spiders: spiders, SpiderWidth: 0.04, N: samples})
	if err != nil {
		t.Fatal(err)
	}
	return p
}

func config(mode string) Config {
	d := diameter / nSub
	return Config{Subapertures: nSub, Mode: mode, ValidThreshold: 0.5, Wavelength: lambdaGS,
		Magnitude: 8, ZeroPoint: 1e10, Throughput: 0.3, FrameRate: 1000,
		PixelsPerSubaperture: 8, PixelScale: lambdaGS / (2 * d), CentroidThreshold: 0.05}
}

// tilt writes OPD = a·Z where Z is Noll's Z2 = 2ρcosθ = 2x/R (xAxis) or
// Z3 = 2ρsinθ = 2y/R, unit rms over the unit disk (Noll 1976). Its slope is 2a/R.
func tilt(p *optics.Pupil, a float64, xAxis bool, opd []float64) {
	r := p.Diameter / 2
	for iy := 0; iy < p.N; iy++ {
		for ix := 0; ix < p.N; ix++ {
			c := p.Coord(iy)
			if xAxis {
				c = p.Coord(ix)
			}
			opd[iy*p.N+ix] = a * 2 * c / r
		}
	}
}

func TestTiltSlopes(t *testing.T) {
	d := diameter / nSub
	pixel := lambdaGS / (2 * d)
	cases := []struct {
		name      string
		mode      string
		samples   int
		threshold float64 // valid threshold
		shift     float64 // spot shift in pixels
		tol       float64
	}{
		// Geometric mode is exact for a tilt, edge subapertures included.
		{"geometric", Geometric, 96, 0.5, 1, 1e-5},
		{"geometric fine sampling", Geometric, 192, 0.5, 0.3, 1e-5},
		// A spot moved by a whole or half pixel is symmetric about its new centre
		// on the pixel grid, so the centre of gravity of fully illuminated
		// subapertures is exact whatever the sampling. Between those positions a
		// Nyquist-sampled centre of gravity is nonlinear by a few percent
		// (pixelisation), which an interaction matrix absorbs.
		{"diffractive 1 pixel", Diffractive, 96, 1, 1, 0.01},
		{"diffractive half pixel", Diffractive, 96, 1, 0.5, 0.01},
		{"diffractive 8 samples per subaperture", Diffractive, 192, 1, 1, 0.01},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			for _, xAxis := range []bool{true, false} {
				p := pupil(t, c.samples, 0.15, 4)
				cfg := config(c.mode)
				cfg.ValidThreshold = c.threshold
				s, err := New(p, cfg)
				if err != nil {
					t.Fatal(err)
				}
				want := c.shift * pixel
				// Slope of a·2x/R is 2a/R, so a = want·R/2.
				opd := make([]float64, p.N*p.N)
				tilt(p, want*p.Diameter/4, xAxis, opd)
				slopes := make([]float32, s.NumSlopes())
				s.Sense(opd, nil, slopes)
				on, off := 0, 1
				if !xAxis {
					on, off = 1, 0
				}
				worst, cross := 0.0, 0.0
				for k := 0; k < s.NumValid(); k++ {
					worst = max(worst, math.Abs(float64(slopes[2*k+on])/want-1))
					cross = max(cross, math.Abs(float64(slopes[2*k+off])/want))
				}
				t.Logf("%s x=%v: %d subapertures, worst relative error %.2g, cross-axis %.2g", c.name, xAxis, s.NumValid(), worst, cross)
				if worst > c.tol || cross > c.tol {
					t.Errorf("%s x=%v: worst relative error %.4g, cross-axis %.4g: want <= %g", c.name, xAxis, worst, cross, c.tol)
				}
			}
		})
	}
}

// TestSpotMatchesFFT compares the pruned DFT of each subaperture with gonum's
// FFT of the same field zero-padded to M×M, binned to the detector.
func TestSpotMatchesFFT(t *testing.T) {
	p := pupil(t, 96, 0.15, 4)
	s, err := New(p, config(Diffractive))
	if err != nil {
		t.Fatal(err)
	}
	sm := s.diff
	rng := rand.New(rand.NewPCG(5, 6))
	opd := make([]float64, p.N*p.N)
	for i := range opd {
		opd[i] = 2e-7 * rng.NormFloat64()
	}
	fft := fourier.NewCmplxFFT(sm.m)
	m, per, q := sm.m, s.per, sm.q
	img := make([]float64, sm.npix*sm.npix)
	for _, k := range []int{0, s.NumValid() / 2, s.NumValid() - 1} {
		padded := make([]complex128, m*m)
		for y := range per {
			for x := range per {
				ph := 2 * math.Pi / lambdaGS * opd[s.origin[k]+y*p.N+x]
				padded[y*m+x] = sm.amp[k][y*per+x] * complex(math.Cos(ph), math.Sin(ph))
			}
		}
		for y := range m {
			fft.Coefficients(padded[y*m:(y+1)*m], padded[y*m:(y+1)*m])
		}
		col := make([]complex128, m)
		for x := range m {
			for y := range m {
				col[y] = padded[y*m+x]
			}
			fft.Coefficients(col, col)
			for y := range m {
				padded[y*m+x] = col[y]
			}
		}
		want := make([]float64, sm.npix*sm.npix)
		for jy := range q {
			for jx := range q {
				v := padded[((jy-q/2+m)%m)*m+(jx-q/2+m)%m]
				want[(jy/sm.over)*sm.npix+jx/sm.over] += sm.norm[k] * (real(v)*real(v) + imag(v)*imag(v))
			}
		}
		if err := s.Image(k, opd, img); err != nil {
			t.Fatal(err)
		}
		for i := range img {
			if math.Abs(img[i]-want[i]) > 1e-9*s.Photons(k) {
				t.Fatalf("subaperture %d pixel %d: %g, gonum FFT gives %g", k, i, img[i], want[i])
			}
		}
	}
}

func TestFlatIsZero(t *testing.T) {
	for _, mode := range []string{Geometric, Diffractive} {
		p := pupil(t, 96, 0.15, 4)
		s, err := New(p, config(mode))
		if err != nil {
			t.Fatal(err)
		}
		slopes := make([]float32, s.NumSlopes())
		s.Sense(make([]float64, p.N*p.N), nil, slopes)
		for i, v := range slopes {
			// A flat wavefront's spot is centred on the detector by construction.
			if math.Abs(float64(v)) > 1e-12 {
				t.Fatalf("%s: slope %d of a flat wavefront = %g", mode, i, v)
			}
		}
	}
}

// TestPhotonNoise compares the centroid variance of many noisy frames of a flat
// wavefront with Rousset 1999 (from memory): σ_φ² = (π²/2)(1/N_ph)(N_T/N_D)² rad²
// for the phase difference across a subaperture, σ_θ = σ_φ·λ/(2π·d).
//
// The detector is 4×4 Nyquist pixels (λ/(2d)), a field of 2λ/d that holds the
// spot's central lobe: the formula describes a compact core, while the 1/x²
// diffraction wings of a square subaperture would add to the centre-of-gravity
// variance in proportion to a wider field. N_D = λ/(d·pixel) = 2 pixels; N_T is
// the FWHM of the noiseless spot the simulation produces, read off its central
// rows by linear interpolation, so pixelisation broadening is accounted for.
// Photon noise only: no read noise, no background, no threshold.
func TestPhotonNoise(t *testing.T) {
	p := pupil(t, 96, 0.15, 0)
	cfg := config(Diffractive)
	cfg.PixelsPerSubaperture = 4
	cfg.CentroidThreshold = 0
	cfg.ValidThreshold = 1 // equal photon counts on every subaperture
	cfg.Noise = true
	for _, mag := range []float64{5, 8} {
		cfg.Magnitude = mag
		s, err := New(p, cfg)
		if err != nil {
			t.Fatal(err)
		}
		opd := make([]float64, p.N*p.N)
		img := make([]float64, 16)
		if err := s.Image(0, opd, img); err != nil {
			t.Fatal(err)
		}
		nt := fwhmEven(img[4:8]) // row 1, the first of the two central rows
		nd := lambdaGS / (s.SubapertureSize() * cfg.PixelScale)
		nph := s.Photons(0)
		phi2 := math.Pi * math.Pi / 2 / nph * (nt / nd) * (nt / nd)
		want := phi2 * math.Pow(lambdaGS/(2*math.Pi*s.SubapertureSize()), 2)

		rng := rand.New(rand.NewPCG(11, uint64(mag)))
		slopes := make([]float32, s.NumSlopes())
		var sum, sum2 float64
		n := 0
		for range 60 {
			s.Sense(opd, rng, slopes)
			for _, v := range slopes {
				sum += float64(v)
				sum2 += float64(v) * float64(v)
				n++
			}
		}
		mean := sum / float64(n)
		got := sum2/float64(n) - mean*mean
		ratio := got / want
		t.Logf("magnitude %g: N_ph %.0f, N_T %.2f px, N_D %.2f px, measured/Rousset %.3f (%d samples)", mag, nph, nt, nd, ratio, n)
		if math.Abs(ratio-1) > 0.25 {
			t.Errorf("magnitude %g: centroid variance %.4g rad², Rousset %.4g rad²: ratio %.3f outside 1±0.25", mag, got, want, ratio)
		}
	}
}

// fwhmEven returns the full width at half maximum, in pixels, of a symmetric
// profile with an even number of samples whose centre lies between the two
// middle samples.
func fwhmEven(row []float64) float64 {
	c := len(row) / 2 // first sample right of the centre, at +0.5 pixel
	h := row[c] / 2
	i := c
	for i+1 < len(row) && row[i+1] > h {
		i++
	}
	if i+1 == len(row) {
		return float64(len(row))
	}
	edge := float64(i-c) + 0.5 + (row[i]-h)/(row[i]-row[i+1])
	return 2 * edge
}

func TestGeometricNoise(t *testing.T) {
	p := pupil(t, 96, 0.15, 4)
	cfg := config(Geometric)
	cfg.Noise = true
	s, err := New(p, cfg)
	if err != nil {
		t.Fatal(err)
	}
	// N_ph = ZP·10^(−0.4 m)·throughput·area/rate (ZP from Bessell et al. 1998,
	// from memory), σ = sqrt(π²/(2 N_ph))·λ/(2π d) (Rousset 1999, from memory).
	k := 0
	full := s.SubapertureSize() * s.SubapertureSize()
	for ; k < s.NumValid() && s.frac[k] < 1; k++ {
	}
	nph := 1e10 * math.Pow(10, -3.2) * 0.3 * full / 1000
	want := math.Sqrt(math.Pi*math.Pi/(2*nph)) * lambdaGS / (2 * math.Pi * s.SubapertureSize())
	if got := s.SlopeNoise(k); math.Abs(got/want-1) > 1e-9 {
		t.Fatalf("slope noise %g, want %g", got, want)
	}
	rng := rand.New(rand.NewPCG(3, 4))
	slopes := make([]float32, s.NumSlopes())
	opd := make([]float64, p.N*p.N)
	var sum2 float64
	frames := 400
	for range frames {
		s.Sense(opd, rng, slopes)
		sum2 += float64(slopes[2*k])*float64(slopes[2*k]) + float64(slopes[2*k+1])*float64(slopes[2*k+1])
	}
	got := math.Sqrt(sum2 / float64(2*frames))
	// 800 samples: the rms is known to about 1/sqrt(2·800) = 2.5 %; allow 4 σ.
	if math.Abs(got/want-1) > 0.1 {
		t.Errorf("measured slope noise %g, want %g", got, want)
	}
}

// TestTransmission dims the star (a cloud letting a quarter of the light
// through) and checks the slope noise against the centre-of-gravity photon
// noise of the dimmer star, σ² = (π²/2)/N·(λ/(2πd))² (Rousset 1999, from memory,
// N_T/N_D = 1 in geometric mode), and the reported flux against the mean
// photon count t·N (in diffractive mode, the noiseless spot's pixel sum: a
// Poisson count's mean).
func TestTransmission(t *testing.T) {
	const trans = 0.25
	for _, mode := range []string{Geometric, Diffractive} {
		t.Run(mode, func(t *testing.T) {
			p := pupil(t, 96, 0.15, 0)
			cfg := config(mode)
			cfg.PixelsPerSubaperture = 4
			cfg.CentroidThreshold = 0
			cfg.ValidThreshold = 1
			cfg.Noise = true
			s, err := New(p, cfg)
			if err != nil {
				t.Fatal(err)
			}
			opd := make([]float64, p.N*p.N)
			slopes := make([]float32, s.NumSlopes())
			frames := 400
			if mode == Diffractive {
				frames = 60
			}
			variance := func(seed uint64) (v, flux float64) {
				rng := rand.New(rand.NewPCG(seed, 17))
				var sum2, f float64
				for range frames {
					s.Sense(opd, rng, slopes)
					for _, x := range slopes {
						sum2 += float64(x) * float64(x)
					}
					for _, x := range s.Flux() {
						f += x
					}
				}
				return sum2 / float64(frames*len(slopes)), f / float64(frames*s.NumValid())
			}
			clear1, _ := variance(1)
			s.SetTransmission(trans)
			if got := s.Transmission(); got != trans {
				t.Fatalf("Transmission() = %g, want %g", got, trans)
			}
			dim, flux := variance(2)
			nph := s.Photons(0)
			want := math.Pi * math.Pi / 2 / (trans * nph) * math.Pow(lambdaGS/(2*math.Pi*s.SubapertureSize()), 2)
			ratio := dim / clear1
			t.Logf("%s: variance clear %.4g, dim %.4g rad² (ratio %.3f, want 1/t = %g); Rousset at t·N %.4g; flux %.1f e- (t·N = %.1f)",
				mode, clear1, dim, ratio, 1/trans, want, flux, trans*nph)
			switch mode {
			case Geometric:
				// 400 frames × 2·NumValid samples: the variance is known to well under 1 %.
				if math.Abs(dim/want-1) > 0.05 || math.Abs(ratio*trans-1) > 0.05 {
					t.Errorf("dim variance %.4g rad², Rousset %.4g; clear/dim ratio %.3f, want %g", dim, want, ratio, 1/trans)
				}
				if math.Abs(flux/(trans*nph)-1) > 1e-9 { // summation rounding
					t.Errorf("flux %g e-, want t·N = %g", flux, trans*nph)
				}
			case Diffractive:
				if math.Abs(ratio*trans-1) > 0.2 {
					t.Errorf("clear/dim variance ratio %.3f, want 1/t = %g within 20 %%", ratio, 1/trans)
				}
				img := make([]float64, 16)
				if err := s.Image(0, opd, img); err != nil {
					t.Fatal(err)
				}
				mean := 0.0
				for _, v := range img {
					mean += v
				}
				// Poisson: the mean of frames·NumValid counts of mean m is known to √(m/samples).
				tol := 4 * math.Sqrt(mean/float64(frames*s.NumValid()))
				if math.Abs(flux-mean) > tol || mean > trans*nph || mean < 0.5*trans*nph {
					t.Errorf("mean flux %.2f e-, want the dimmed spot's %.2f ± %.2f (t·N = %.1f)", flux, mean, tol, trans*nph)
				}
			}
		})
	}
}

func TestSetTransmissionRefuses(t *testing.T) {
	p := pupil(t, 96, 0.15, 0)
	s, err := New(p, config(Geometric))
	if err != nil {
		t.Fatal(err)
	}
	for _, v := range []float64{0, -0.1, 1.01, math.NaN(), math.Inf(1)} {
		t.Run(fmt.Sprint(v), func(t *testing.T) {
			defer func() {
				if recover() == nil {
					t.Errorf("SetTransmission(%g) did not panic", v)
				}
			}()
			s.SetTransmission(v)
		})
	}
}

func TestValidCount(t *testing.T) {
	for _, c := range []struct {
		obstruction float64
		spiders     int
	}{{0, 0}, {0.15, 0}, {0.15, 4}, {0.3, 0}} {
		t.Run(fmt.Sprintf("obstruction %g, %d spiders", c.obstruction, c.spiders), func(t *testing.T) {
			p := pupil(t, 96, c.obstruction, c.spiders)
			s, err := New(p, config(Geometric))
			if err != nil {
				t.Fatal(err)
			}
			// Plain geometry: an annulus of outer diameter N subapertures covers
			// (π/4)·N²·(1 − ε²) subaperture areas; a 0.5 threshold keeps about that many.
			want := math.Pi / 4 * nSub * nSub * (1 - c.obstruction*c.obstruction)
			got := float64(s.NumValid())
			if math.Abs(got/want-1) > 0.05 {
				t.Errorf("obstruction %g spiders %d: %v valid, want %.0f ± 5%%", c.obstruction, c.spiders, got, want)
			}
			v := s.Valid()
			for sy := 0; sy < nSub; sy++ {
				for sx := 0; sx < nSub; sx++ {
					if v[sy*nSub+sx] != v[(nSub-1-sy)*nSub+(nSub-1-sx)] {
						t.Fatalf("valid map not symmetric under inversion at (%d, %d)", sx, sy)
					}
				}
			}
			if c.obstruction > 0 && v[(nSub/2)*nSub+nSub/2] {
				t.Errorf("obstruction %g: the central subaperture is valid", c.obstruction)
			}
			strict := config(Geometric)
			strict.ValidThreshold = 1
			s1, err := New(p, strict)
			if err != nil {
				t.Fatal(err)
			}
			if s1.NumValid() >= s.NumValid() {
				t.Errorf("threshold 1 keeps %d, threshold 0.5 keeps %d: want fewer", s1.NumValid(), s.NumValid())
			}
		})
	}
}

func TestSenseAllocatesNothing(t *testing.T) {
	for _, mode := range []string{Geometric, Diffractive} {
		p := pupil(t, 96, 0.15, 4)
		cfg := config(mode)
		cfg.Noise = true
		cfg.ReadNoise = 0.5
		cfg.Background = 0.2
		s, err := New(p, cfg)
		if err != nil {
			t.Fatal(err)
		}
		opd := make([]float64, p.N*p.N)
		tilt(p, 1e-7, true, opd)
		slopes := make([]float32, s.NumSlopes())
		rng := rand.New(rand.NewPCG(1, 2))
		if a := testing.AllocsPerRun(5, func() { s.Sense(opd, rng, slopes) }); a != 0 {
			t.Errorf("%s: Sense allocates %v times per call", mode, a)
		}
	}
}

func TestNewRefuses(t *testing.T) {
	p := pupil(t, 96, 0.15, 0)
	cases := []struct {
		name string
		edit func(*Config)
	}{
		{"zero subapertures", func(c *Config) { c.Subapertures = 0 }},
		{"not a divisor", func(c *Config) { c.Subapertures = 25 }},
		{"one sample per subaperture", func(c *Config) { c.Subapertures = 96 }},
		{"bad mode", func(c *Config) { c.Mode = "optical" }},
		{"zero threshold", func(c *Config) { c.ValidThreshold = 0 }},
		{"negative wavelength", func(c *Config) { c.Wavelength = -1 }},
		{"zero frame rate", func(c *Config) { c.FrameRate = 0 }},
		{"throughput above 1", func(c *Config) { c.Throughput = 1.5 }},
		{"negative read noise", func(c *Config) { c.ReadNoise = -1 }},
		{"field too wide", func(c *Config) { c.PixelsPerSubaperture = 9 }},
		{"pixel scale not commensurate", func(c *Config) { c.PixelScale *= 1.0 / math.Pi }},
		{"centroid threshold 1", func(c *Config) { c.CentroidThreshold = 1 }},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			cfg := config(Diffractive)
			c.edit(&cfg)
			if _, err := New(p, cfg); err == nil {
				t.Errorf("%s: accepted", c.name)
			}
		})
	}
}

func BenchmarkSense(b *testing.B) {
	for _, mode := range []string{Geometric, Diffractive} {
		b.Run(mode, func(b *testing.B) {
			p := pupil(b, 96, 0.15, 4)
			cfg := config(mode)
			cfg.Noise = true
			s, err := New(p, cfg)
			if err != nil {
				b.Fatal(err)
			}
			opd := make([]float64, p.N*p.N)
			slopes := make([]float32, s.NumSlopes())
			rng := rand.New(rand.NewPCG(1, 2))
			for b.Loop() {
				s.Sense(opd, rng, slopes)
			}
		})
	}
}
