package atmosphere

import (
	"fmt"
	"math"
	"math/cmplx"
	"math/rand/v2"

	"stillsky/sim/optics"
)

// Wavelength500 is the reference wavelength of r0 and of phase screens, in metres.
const Wavelength500 = 500e-9

// vonKarman is the phase power spectrum Φ(f) = 0.023 r0^(−5/3) (f² + 1/L0²)^(−11/6),
// f in cycles per metre, rad² m² (Noll 1976; Roddier 1981). L0 = +Inf gives the
// Kolmogorov spectrum.
func vonKarman(f, r0, l0 float64) float64 {
	return 0.023 * math.Pow(r0, -5.0/3) * math.Pow(f*f+1/(l0*l0), -11.0/6)
}

// cellVariance is the variance given to the subharmonic plane wave at frequency
// (fx, fy), which stands for a square cell of side h in the frequency plane. Sampling
// Φ at the cell centre underweights these cells, all next to f = 0 where Φ ∝
// f^(−11/3) changes by a large factor across one cell. A cell adds ≈ 2π²(f·r)²Φ to the
// structure function at r ≪ 1/f, so the variance is the cell's integral of f²Φ(f)
// divided by f_c², which keeps that quadratic (tilt-like) part right (our own
// refinement of Lane, Glindemann & Dainty 1992; with it Δ1 of Noll 1976 comes out
// within about 6% instead of 12%). 8×8 mid-point sub-cells integrate it.
func cellVariance(fx, fy, h, r0, l0 float64) float64 {
	const m = 8
	var s float64
	for i := 0; i < m; i++ {
		for j := 0; j < m; j++ {
			ux := fx + h*((float64(i)+0.5)/m-0.5)
			uy := fy + h*((float64(j)+0.5)/m-0.5)
			f2 := ux*ux + uy*uy
			s += f2 * vonKarman(math.Sqrt(f2), r0, l0)
		}
	}
	return s * (h / m) * (h / m) / (fx*fx + fy*fy)
}

// ScreenConfig describes square phase screens.
type ScreenConfig struct {
	// Size is the number of samples on a side (>= 2).
	Size int
	// PixelScale is the sample spacing in metres.
	PixelScale float64
	// R0 is the Fried parameter at 500 nm in metres.
	R0 float64
	// L0 is the outer scale in metres; +Inf for Kolmogorov turbulence.
	L0 float64
	// Subharmonics adds the 3×3 subharmonics of Lane, Glindemann & Dainty (1992), 3
	// to 8 levels depending on L0 (see levelsFor), which restore the power below the
	// screen's lowest FFT frequency.
	Subharmonics bool
}

func (c ScreenConfig) validate() error {
	switch {
	case c.Size < 2 || c.Size > 1<<14:
		return fmt.Errorf("atmosphere: screen size %d: must be in [2, 16384]", c.Size)
	case !(c.PixelScale > 0) || math.IsInf(c.PixelScale, 0):
		return fmt.Errorf("atmosphere: screen pixel scale %g m: must be a finite positive number", c.PixelScale)
	case !(c.R0 > 0) || math.IsInf(c.R0, 0):
		return fmt.Errorf("atmosphere: r0 %g m: must be a finite positive number", c.R0)
	case !(c.L0 > 0):
		return fmt.Errorf("atmosphere: L0 %g m: must be positive (+Inf for Kolmogorov)", c.L0)
	}
	return nil
}

// Subharmonic levels: level p adds a 3×3 grid of frequencies spaced Δf/3^p around
// f = 0, leaving out the centre, which the next level fills (Lane, Glindemann &
// Dainty 1992). Three levels are the usual choice, but for an outer scale much larger
// than the screen the missing tilt power falls only as 3^(−P/3) with P levels (the
// tilt integrand goes as f^(−2/3) df at low f; our derivation from the Kolmogorov
// spectrum), so levels are added until the lowest one is below 1/(10·L0), up to
// maxLevels (3^(−8/3) ≈ 5% of the sub-Δf tilt left out for L0 = ∞).
const (
	minLevels = 3
	maxLevels = 8
)

// levelsFor returns the number of subharmonic levels for frequency step df.
func levelsFor(df, l0 float64) int {
	p := minLevels
	for p < maxLevels && df/math.Pow(3, float64(p)) > 1/(10*l0) {
		p++
	}
	return p
}

// shCoef holds the complex amplitudes of the subharmonic plane waves, indexed
// [level][a+1][b+1] for the frequency (a, b)·Δf/3^(level+1), a, b ∈ {−1, 0, 1}; the
// centre [level][1][1] is always zero.
type shCoef [maxLevels][3][3]complex128

// waveTable evaluates the subharmonic field Re Σ c·exp(2πi(fx·x + fy·y)) on a grid of
// nx × ny samples at x = ix·dx, y = iy·dx, minus its mean over the grid. The plane
// waves are separable, and the a = ±1 columns are complex conjugates, so one sample
// costs two multiply-adds per level.
//
// The mean matters: for a large outer scale the lowest waves are metres to
// kilometres long and their amplitude is huge, but over the grid they are nearly a
// constant, a piston that no sensor or camera sees. Left in, it would dominate the
// frame-to-frame change of the phase at a point when the layers blend their screens.
type waveTable struct {
	levels   int
	nx, ny   int
	xr, xi   [maxLevels + 1][]float64 // cos and sin of 2π·df_p·x
	yc       [maxLevels][]complex128
	mx, my   [maxLevels]complex128 // grid means of exp(2πi·df_p·x) and of exp(2πi·df_p·y)
	alpha    [maxLevels + 1]float64
	beta     [maxLevels + 1]float64
	rowWaves [maxLevels][3]complex128
}

func newWaveTable(levels, nx, ny int, dx, df float64) *waveTable {
	w := &waveTable{levels: levels, nx: nx, ny: ny}
	// Tables up to a multiple of three levels, so that eval can take three levels
	// per pass; the extra levels have zero coefficients.
	for p := 0; p < (levels+2)/3*3; p++ {
		w.xr[p], w.xi[p] = make([]float64, nx), make([]float64, nx)
		if p >= levels {
			continue
		}
		dfp := df / math.Pow(3, float64(p+1))
		for ix := 0; ix < nx; ix++ {
			w.xi[p][ix], w.xr[p][ix] = math.Sincos(2 * math.Pi * dfp * float64(ix) * dx)
		}
		w.yc[p] = make([]complex128, ny)
		for iy := 0; iy < ny; iy++ {
			s, c := math.Sincos(2 * math.Pi * dfp * float64(iy) * dx)
			w.yc[p][iy] = complex(c, s)
			w.my[p] += w.yc[p][iy] / complex(float64(ny), 0)
		}
		for ix := 0; ix < nx; ix++ {
			w.mx[p] += complex(w.xr[p][ix], w.xi[p][ix]) / complex(float64(nx), 0)
		}
	}
	return w
}

// mean returns the grid mean of the field of coefficients c.
func (w *waveTable) mean(c *shCoef) float64 {
	var m float64
	for p := 0; p < w.levels; p++ {
		x := [3]complex128{cmplx.Conj(w.mx[p]), 1, w.mx[p]}
		y := [3]complex128{cmplx.Conj(w.my[p]), 1, w.my[p]}
		for a := 0; a < 3; a++ {
			for b := 0; b < 3; b++ {
				m += real(c[p][a][b] * x[a] * y[b])
			}
		}
	}
	return m
}

// eval writes (add false) or adds (add true) the field of coefficients c into out
// (row-major, nx per row).
func (w *waveTable) eval(c *shCoef, out []float64, add bool) {
	mean := w.mean(c)
	for iy := 0; iy < w.ny; iy++ {
		base := -mean
		for p := 0; p < w.levels; p++ {
			ey := w.yc[p][iy]
			eyc := complex(real(ey), -imag(ey))
			for a := 0; a < 3; a++ {
				w.rowWaves[p][a] = c[p][a][0]*eyc + c[p][a][1] + c[p][a][2]*ey
			}
			base += real(w.rowWaves[p][1])
			m, pl := w.rowWaves[p][0], w.rowWaves[p][2]
			w.alpha[p] = real(pl) + real(m)
			w.beta[p] = imag(m) - imag(pl)
		}
		row := out[iy*w.nx : (iy+1)*w.nx]
		for p := 0; p < w.levels; p += 3 {
			x0r, x0i := w.xr[p][:len(row)], w.xi[p][:len(row)]
			x1r, x1i := w.xr[p+1][:len(row)], w.xi[p+1][:len(row)]
			x2r, x2i := w.xr[p+2][:len(row)], w.xi[p+2][:len(row)]
			a0, b0, a1, b1, a2, b2 := w.alpha[p], w.beta[p], w.alpha[p+1], w.beta[p+1], w.alpha[p+2], w.beta[p+2]
			waves6(row, p > 0 || add, base, [6][]float64{x0r, x0i, x1r, x1i, x2r, x2i}, [6]float64{a0, b0, a1, b1, a2, b2})
			base = 0
		}
	}
}

// ScreenGenerator makes independent von Kármán phase screens (radians at 500 nm) by
// the FFT method: φ = Re FT{c(f)·√Φ(f)·Δf}, c complex unit Gaussian noise, Δf = 1/(N·dx),
// plus optional subharmonics. Its buffers are allocated once; it is not safe for
// concurrent use.
type ScreenGenerator struct {
	c      ScreenConfig
	amp    []float64 // √Φ(f)·Δf per FFT frequency, 0 at f = 0
	sh     shCoef    // standard deviation of each subharmonic (real parts)
	levels int
	fft    *optics.FFT2
	work   []complex128
	grid   *waveTable
	half   []complex128 // exp(−iπk/N) per frequency index k, k signed: a half-sample shift
}

// NewScreenGenerator checks c and precomputes the spectrum.
func NewScreenGenerator(c ScreenConfig) (*ScreenGenerator, error) {
	if err := c.validate(); err != nil {
		return nil, err
	}
	n := c.Size
	fft, err := optics.NewFFT2(n)
	if err != nil {
		return nil, err
	}
	g := &ScreenGenerator{c: c, amp: make([]float64, n*n), fft: fft, work: make([]complex128, n*n), half: make([]complex128, n)}
	df := 1 / (float64(n) * c.PixelScale)
	signed := func(k int) int {
		if k > n/2 {
			k -= n
		}
		return k
	}
	freq := func(k int) float64 { return float64(signed(k)) * df }
	for k := range g.half {
		sn, cs := math.Sincos(-math.Pi * float64(signed(k)) / float64(n))
		g.half[k] = complex(cs, sn)
	}
	for ky := 0; ky < n; ky++ {
		for kx := 0; kx < n; kx++ {
			if kx == 0 && ky == 0 {
				continue
			}
			g.amp[ky*n+kx] = math.Sqrt(vonKarman(math.Hypot(freq(kx), freq(ky)), c.R0, c.L0)) * df
		}
	}
	g.levels = levelsFor(df, c.L0)
	for p := 0; p < g.levels; p++ {
		dfp := df / math.Pow(3, float64(p+1))
		for a := -1; a <= 1; a++ {
			for b := -1; b <= 1; b++ {
				if a == 0 && b == 0 {
					continue
				}
				v := cellVariance(float64(a)*dfp, float64(b)*dfp, dfp, c.R0, c.L0)
				g.sh[p][a+1][b+1] = complex(math.Sqrt(v), 0)
			}
		}
	}
	if c.Subharmonics {
		g.grid = newWaveTable(g.levels, n, n, c.PixelScale, df)
	}
	return g, nil
}

// Config returns the configuration of g.
func (g *ScreenGenerator) Config() ScreenConfig { return g.c }

// Generate writes a new screen into out (length Size², row-major), drawing its noise
// from rng; the screen has zero mean over the grid (the FFT part has no f = 0 term
// and the subharmonics are evaluated without their mean). It allocates nothing. It panics
// if out has the wrong length.
func (g *ScreenGenerator) Generate(rng *rand.Rand, out []float64) {
	if len(out) != g.c.Size*g.c.Size {
		panic(fmt.Sprintf("atmosphere: screen length %d, want %d", len(out), g.c.Size*g.c.Size))
	}
	j := job{work: g.work, rng: rng, out: out}
	for !g.step(&j, 1<<30) {
	}
	if !g.c.Subharmonics {
		return
	}
	g.grid.eval(&j.sh, out, true)
}

// phases is the number of planes a layer screen is stored in: the band-limited
// field sampled at the grid points shifted by (p/2, q/2) samples, p, q ∈ {0, 1},
// plane 2q + p. Together they are the field on a grid of half the spacing.
const phases = 4

// job is one screen (or two) being generated in slices, each one unit of work: noise
// rows, then for each plane row FFTs, blocks of columnsPerUnit column FFTs and rows
// copied out.
type job struct {
	work []complex128
	// spec, for re and im, keeps the noise-weighted spectrum from which each plane
	// is transformed; out transforms it in work directly.
	spec []complex128
	rng  *rand.Rand
	// out, when not nil, receives the real part as a plain Size×Size screen.
	out []float64
	// re and im, otherwise, receive the real and imaginary parts, two independent
	// screens with the same statistics (the noise is circular Gaussian and the
	// spectrum even in f), as float32 in phases planes of row stride Size+ext. The
	// first ext rows and columns of each plane are repeated after the last ones (the
	// periodic extension), so that a window of up to ext+1 samples is read without
	// wrapping indices.
	re, im []float32
	ext    int
	sh     shCoef // subharmonic coefficients drawn for out or re
	sh2    shCoef // and for im
	done   int    // units completed, out of units()
}

// columnsPerUnit column FFTs make one unit of work, so that the pass over the rows
// that gathers the columns is shared.
const columnsPerUnit = 8

// planes returns the number of planes j makes.
func (j *job) planes() int {
	if j.out != nil {
		return 1
	}
	return phases
}

// perPlane is the work of one plane: row FFTs, column FFT blocks, rows copied out.
func (g *ScreenGenerator) perPlane() int {
	n := g.c.Size
	return 2*n + (n+columnsPerUnit-1)/columnsPerUnit
}

func (g *ScreenGenerator) units(j *job) int {
	return g.c.Size + j.planes()*g.perPlane()
}

// step does up to max units of j and reports whether the screen is complete. The
// random numbers are drawn in the same order however the work is sliced, so a screen
// depends only on the state of the generator's rng.
//
// Plane 2q + p is the field φ(x + p/2, y + q/2), x and y in samples: with the
// transform's sign, φ(x) = Σ_k c_k exp(−2πi k·x/N), so the shift multiplies c_k by
// exp(−iπ(p·kx + q·ky)/N), k signed in (−N/2, N/2] (the DFT shift theorem). This is
// the band-limited interpolation of the screen, exact at every point between the
// samples; the planes interleaved are the field on a grid of half the spacing.
func (g *ScreenGenerator) step(j *job, max int) bool {
	n := g.c.Size
	nb := (n + columnsPerUnit - 1) / columnsPerUnit
	per := g.perPlane()
	total := g.units(j)
	spec := j.spec
	if j.out != nil {
		spec = j.work
	}
	for ; max > 0 && j.done < total; max-- {
		k := j.done
		if k < n {
			row := spec[k*n : (k+1)*n]
			amp := g.amp[k*n : (k+1)*n]
			for i := range row {
				row[i] = complex(j.rng.NormFloat64()*amp[i], j.rng.NormFloat64()*amp[i])
			}
			if k == n-1 {
				g.drawSubharmonics(j)
			}
			j.done++
			continue
		}
		plane, r := (k-n)/per, (k-n)%per
		switch {
		case r < n:
			if j.out == nil {
				g.shiftRow(j, plane, r)
			}
			g.fft.Rows(j.work, r, r+1)
		case r < n+nb:
			x := (r - n) * columnsPerUnit
			g.fft.Columns(j.work, x, min(x+columnsPerUnit, n))
		default:
			g.copyOut(j, plane, r-n-nb)
		}
		j.done++
	}
	return j.done == total
}

// shiftRow writes row ky of the spectrum into work, shifted for plane.
func (g *ScreenGenerator) shiftRow(j *job, plane, ky int) {
	n := g.c.Size
	src, dst := j.spec[ky*n:(ky+1)*n], j.work[ky*n:(ky+1)*n]
	f := complex(1, 0)
	if plane/2 == 1 {
		f = g.half[ky]
	}
	if plane%2 == 0 {
		for kx, v := range src {
			dst[kx] = v * f
		}
		return
	}
	for kx, v := range src {
		dst[kx] = v * f * g.half[kx]
	}
}

// copyOut writes row y of the transformed noise to the job's screens.
func (g *ScreenGenerator) copyOut(j *job, plane, y int) {
	n := g.c.Size
	row := j.work[y*n : (y+1)*n]
	if j.out != nil {
		dst := j.out[y*n : (y+1)*n]
		for x, v := range row {
			dst[x] = real(v)
		}
		return
	}
	stride := n + j.ext
	base := plane * stride * stride
	for t := y; t < n+j.ext; t += n {
		re, im := j.re[base+t*stride:base+(t+1)*stride], j.im[base+t*stride:base+(t+1)*stride]
		for x, v := range row {
			re[x], im[x] = float32(real(v)), float32(imag(v))
		}
		copy(re[n:], re[:j.ext])
		copy(im[n:], im[:j.ext])
	}
}

func (g *ScreenGenerator) drawSubharmonics(j *job) {
	g.draw(j.rng, &j.sh)
	if j.im != nil {
		g.draw(j.rng, &j.sh2)
	}
}

func (g *ScreenGenerator) draw(rng *rand.Rand, c *shCoef) {
	for p := range c {
		for a := range c[p] {
			for b := range c[p][a] {
				amp := real(g.sh[p][a][b])
				c[p][a][b] = complex(rng.NormFloat64()*amp, rng.NormFloat64()*amp)
			}
		}
	}
}
