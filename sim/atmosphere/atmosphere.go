package atmosphere

import (
	"fmt"
	"math"
	"math/rand/v2"

	"stillsky/sim/optics"
)

// LayerConfig describes one frozen-flow layer.
type LayerConfig struct {
	// Altitude in metres above the telescope (>= 0). OPD looks at one on-axis star
	// at infinity, where every layer is sampled over the same pupil footprint;
	// OPDView samples each layer where a beacon's cone or an offset direction
	// crosses it.
	Altitude float64
	// Fraction of the integrated Cn² in this layer, in (0, 1]; the fractions of all
	// layers sum to 1. The layer's own r0 is r0·Fraction^(−3/5).
	Fraction float64
	// WindSpeed in metres per second (>= 0).
	WindSpeed float64
	// WindDirectionDeg is the direction the turbulence moves towards, in degrees
	// from +x towards +y: φ(x, t) = φ(x − v·t, 0).
	WindDirectionDeg float64
}

// Config describes the turbulence along the line of sight.
type Config struct {
	// R0 is the Fried parameter at 500 nm towards the zenith, in metres.
	R0 float64
	// L0 is the outer scale in metres (+Inf for Kolmogorov turbulence).
	L0 float64
	// ZenithDeg is the zenith angle in [0, 80] degrees; r0 along the line of sight
	// is R0·(cos z)^(3/5) (Roddier 1981).
	ZenithDeg float64
	// Layers, at least one.
	Layers []LayerConfig
	// Seed makes the run reproducible.
	Seed int64
}

func (c Config) validate() error {
	switch {
	case !(c.R0 > 0) || math.IsInf(c.R0, 0):
		return fmt.Errorf("atmosphere: r0 %g m: must be a finite positive number", c.R0)
	case !(c.L0 > 0):
		return fmt.Errorf("atmosphere: L0 %g m: must be positive (+Inf for Kolmogorov)", c.L0)
	case !(c.ZenithDeg >= 0 && c.ZenithDeg <= 80):
		return fmt.Errorf("atmosphere: zenith angle %g deg: must be in [0, 80]", c.ZenithDeg)
	case len(c.Layers) == 0:
		return fmt.Errorf("atmosphere: layers: at least one is needed")
	}
	sum := 0.0
	for i, l := range c.Layers {
		switch {
		case !(l.Fraction > 0 && l.Fraction <= 1):
			return fmt.Errorf("atmosphere: layer %d fraction %g: must be in (0, 1]", i, l.Fraction)
		case !(l.Altitude >= 0) || math.IsInf(l.Altitude, 0):
			return fmt.Errorf("atmosphere: layer %d altitude %g m: must be finite and >= 0", i, l.Altitude)
		case !(l.WindSpeed >= 0) || math.IsInf(l.WindSpeed, 0):
			return fmt.Errorf("atmosphere: layer %d wind speed %g m/s: must be finite and >= 0", i, l.WindSpeed)
		case math.IsNaN(l.WindDirectionDeg) || math.IsInf(l.WindDirectionDeg, 0):
			return fmt.Errorf("atmosphere: layer %d wind direction %g deg: must be finite", i, l.WindDirectionDeg)
		}
		sum += l.Fraction
	}
	if math.Abs(sum-1) > 1e-3 {
		return fmt.Errorf("atmosphere: layer fractions sum to %g: must sum to 1", sum)
	}
	return nil
}

// finishBy is the fraction of a crossing time by which the next screen is complete.
const finishBy = 0.75

// layer is one frozen-flow layer: the blend cos θ·from + sin θ·to of two periodic
// screens (plus their subharmonics) translated by the wind. One generation job gives
// two screens (real and imaginary parts), written into spare and ready; the first
// becomes the next "to" and the second the one after, so a job runs every other
// crossing time.
type layer struct {
	weight          float64   // metres of OPD per radian of phase at 500 nm, with √Fraction
	vx, vy          float64   // m/s
	period          float64   // screen-crossing time, s; +Inf without wind
	x, y            float64   // distance travelled, metres, modulo the subharmonic period
	elapsed         float64   // time into the current crossing, s
	from, to, spare []float32 // phases planes each; float32 halves the memory traffic of OPD
	ready           []float32
	shFrom, shTo    shCoef
	shReady         shCoef
	hasReady        bool // ready holds the second screen of the last job
	rng             *rand.Rand
	next            job
	running         bool // next is in progress
}

// Atmosphere is a set of frozen-flow layers sampled on a pupil grid. It is not safe
// for concurrent use.
type Atmosphere struct {
	p      *optics.Pupil
	r0     float64 // line of sight, 500 nm
	gen    *ScreenGenerator
	size   int
	wrap   float64 // period of the whole screen including subharmonics, metres
	df     float64
	stride int // row stride of the stored screens: size plus the periodic extension
	layers []*layer
	alt    []float64 // each layer's altitude along the line of sight (times sec z), metres
	waves  *waveTable
	coef   shCoef
	rowBuf [2][]float32 // one row of a layer's vertically interpolated window, per column phase
}

// screenSize is the side of each layer's periodic screen: at least four pupil
// diameters (so the wind crosses the pupil four times per screen) and 64 samples,
// rounded up to a product of 2s and 3s, the radices optics.FFT2 is fastest with.
func screenSize(n int) int {
	want := max(4*n, 64)
	best := math.MaxInt
	for a := 1; a <= want*2; a *= 2 {
		for b := a; b < best; b *= 3 {
			if b >= want {
				best = b
				break
			}
		}
	}
	return best
}

// New builds the layers for pupil p, generating each layer's first two screens.
func New(c Config, p *optics.Pupil) (*Atmosphere, error) {
	if err := c.validate(); err != nil {
		return nil, err
	}
	r0 := c.R0 * math.Pow(math.Cos(c.ZenithDeg*math.Pi/180), 3.0/5)
	s := screenSize(p.N)
	gen, err := NewScreenGenerator(ScreenConfig{Size: s, PixelScale: p.Scale, R0: r0, L0: c.L0})
	if err != nil {
		return nil, err
	}
	side := float64(s) * p.Scale
	// The stored screens repeat their first N+3 rows and columns, so the pupil window
	// with the margin of the six-point stencil is always contiguous; rounded up to
	// whole vectors of 8, so that every screen column of a window row is combined by
	// the same kernel whatever the window's offset (the vector and scalar kernels
	// round differently), and the sampled turbulence does not depend on where the
	// layer stands.
	ext := (p.N + 3 + 7) &^ 7
	stride := s + ext
	a := &Atmosphere{p: p, r0: r0, gen: gen, size: s, df: 1 / side, stride: stride,
		rowBuf: [2][]float32{make([]float32, ext), make([]float32, ext)}}
	a.wrap = side * math.Pow(3, float64(gen.levels))
	a.waves = newWaveTable(gen.levels, p.N, p.N, p.Scale, a.df)
	for i, lc := range c.Layers {
		dir := lc.WindDirectionDeg * math.Pi / 180
		l := &layer{
			weight: math.Sqrt(lc.Fraction) * Wavelength500 / (2 * math.Pi),
			vx:     lc.WindSpeed * math.Cos(dir),
			vy:     lc.WindSpeed * math.Sin(dir),
			period: side / lc.WindSpeed,
			from:   make([]float32, phases*stride*stride),
			to:     make([]float32, phases*stride*stride),
			rng:    rand.New(rand.NewPCG(uint64(c.Seed), uint64(i)+1)),
		}
		first := job{work: make([]complex128, s*s), spec: make([]complex128, s*s), rng: l.rng, re: l.from, im: l.to, ext: stride - s}
		for !gen.step(&first, 1<<30) {
		}
		l.shFrom, l.shTo = first.sh, first.sh2
		// A layer without wind never leaves its first screen and needs no others.
		if lc.WindSpeed > 0 {
			l.spare = touched(phases * stride * stride)
			l.ready = touched(phases * stride * stride)
			l.next = a.newJob(l, &first)
			l.running = true
		}
		a.layers = append(a.layers, l)
		a.alt = append(a.alt, lc.Altitude/math.Cos(c.ZenithDeg*math.Pi/180))
	}
	return a, nil
}

// touched returns a zeroed slice of n float32 whose pages the process has already
// written: a fresh allocation is mapped by the operating system page by page on
// first write, which for the spare screens (hundreds of megabytes on a large
// pupil) would otherwise land on the frames that generate the first screens.
func touched(n int) []float32 {
	s := make([]float32, n)
	clear(s)
	return s
}

// newJob starts the generation of l's next two screens into spare and ready, in
// the buffers of the job prev.
func (a *Atmosphere) newJob(l *layer, prev *job) job {
	return job{work: prev.work, spec: prev.spec, rng: l.rng, re: l.spare, im: l.ready, ext: a.stride - a.size}
}

// ScreenSize returns the side in samples of each layer's periodic screen.
func (a *Atmosphere) ScreenSize() int { return a.size }

// R0At returns r0 along the line of sight at wavelength lambda (metres):
// r0(λ) = r0(500 nm)·(λ/500 nm)^(6/5) (Fried 1966; Roddier 1981), zenith angle applied.
func (a *Atmosphere) R0At(lambda float64) float64 {
	return a.r0 * math.Pow(lambda/Wavelength500, 6.0/5)
}

// Advance moves every layer on by dt seconds of frozen flow and continues the
// generation of the next screens. A dt that is not positive and finite is ignored.
// Over a long run each call does a small, even share of the generation work; a single
// call spanning several crossing times generates the screens it needs at once.
func (a *Atmosphere) Advance(dt float64) {
	if !(dt > 0) || math.IsInf(dt, 0) {
		return
	}
	for _, l := range a.layers {
		a.advance(l, dt)
	}
}

func (a *Atmosphere) advance(l *layer, dt float64) {
	l.x = math.Mod(l.x+l.vx*dt, a.wrap)
	l.y = math.Mod(l.y+l.vy*dt, a.wrap)
	if math.IsInf(l.period, 1) {
		return
	}
	l.elapsed += dt
	if crossings := math.Floor(l.elapsed / l.period); crossings >= 1 {
		// Beyond four crossings (two jobs) the screens would be dropped unseen.
		for k := 0; k < int(min(crossings, 4)); k++ {
			a.swap(l)
		}
		l.elapsed -= crossings * l.period
	}
	if !l.running {
		return
	}
	target := int(math.Ceil(float64(a.gen.units(&l.next)) * min(1, l.elapsed/(finishBy*l.period))))
	if target > l.next.done {
		a.gen.step(&l.next, target-l.next.done)
	}
}

// swap ends a crossing time: "to" becomes "from" and the next screen becomes "to".
func (a *Atmosphere) swap(l *layer) {
	if l.hasReady {
		l.from, l.to, l.ready = l.to, l.ready, l.from
		l.shFrom, l.shTo = l.shTo, l.shReady
		l.hasReady = false
		l.next = a.newJob(l, &l.next)
		l.running = true
		return
	}
	a.gen.step(&l.next, 1<<30)
	l.from, l.to, l.spare = l.to, l.spare, l.from
	l.shFrom, l.shTo, l.shReady = l.shTo, l.next.sh, l.next.sh2
	l.hasReady = true
	l.running = false
}

// OPD writes the optical path difference of all layers, in metres, at every sample
// of the pupil grid (length N*N): OPD = λ500/(2π)·Σ √f_i·φ_i, with φ_i the layer's
// blended screen sampled at x − v_i·t (see addLayer) plus its subharmonic plane
// waves evaluated exactly, less their mean over the grid (a piston, see waveTable). It allocates nothing; it panics if out has the wrong length.
func (a *Atmosphere) OPD(out []float64) {
	n := a.p.N
	if len(out) != n*n {
		panic(fmt.Sprintf("atmosphere: OPD length %d, want %d", len(out), n*n))
	}
	a.subharmonics()
	a.waves.eval(&a.coef, out, false)
	for _, l := range a.layers {
		a.addLayer(l, out)
	}
}

// theta is the blend angle of l, 0 → π/2 over one crossing time.
func (l *layer) theta() float64 {
	if math.IsInf(l.period, 1) {
		return 0
	}
	return math.Pi / 2 * l.elapsed / l.period
}

// subharmonics sums the layers' plane waves, each translated by its layer's travel:
// φ(x − s) has the coefficients c·exp(−2πi f·s).
func (a *Atmosphere) subharmonics() {
	a.coef = shCoef{}
	for _, l := range a.layers {
		s, c := math.Sincos(l.theta())
		for p := 0; p < a.gen.levels; p++ {
			dfp := a.df / math.Pow(3, float64(p+1))
			sx, cx := math.Sincos(-2 * math.Pi * dfp * l.x)
			sy, cy := math.Sincos(-2 * math.Pi * dfp * l.y)
			ex := [3]complex128{complex(cx, -sx), 1, complex(cx, sx)}
			ey := [3]complex128{complex(cy, -sy), 1, complex(cy, sy)}
			for i := 0; i < 3; i++ {
				for j := 0; j < 3; j++ {
					v := complex(c*l.weight, 0)*l.shFrom[p][i][j] + complex(s*l.weight, 0)*l.shTo[p][i][j]
					a.coef[p][i][j] += v * ex[i] * ey[j]
				}
			}
		}
	}
}

// stencil places the six-point interpolation at u ∈ [0, N) samples of a screen of
// N samples. On the grid of half spacing that the planes interleave, the nodes are
// the fine samples X0−2 … X0+3 around 2u, X0 = ⌊2u⌋; the first of them is fine
// sample 2b + h, which stencil returns as the coarse sample b (wrapped into [0, N))
// and the parity h, with the Lagrange weights at the remainder 2u − X0.
func stencil(u float64, n int) (b, h int, w [6]float64) {
	x0 := int(2 * u) // u >= 0; u == N by rounding gives b = N−1, inside the extension
	b = x0/2 - 1
	if b < 0 {
		b += n
	}
	return b, x0 & 1, lagrange6(2*u - float64(x0))
}

// lagrange6 returns the weights of six-point Lagrange interpolation at t ∈ [0, 1)
// between the nodes −2 … 3, w_m = Π_{j≠m} (t − j)/(m − j) (Abramowitz & Stegun,
// Handbook of Mathematical Functions, 1964, 25.2.2). The weights are continuous in
// t and become those of the next stencil at t = 1, so the sampled field has no
// jump as the wind carries it across a node.
func lagrange6(t float64) (w [6]float64) {
	for m := -2; m <= 3; m++ {
		p := 1.0
		for j := -2; j <= 3; j++ {
			if j != m {
				p *= (t - float64(j)) / float64(m-j)
			}
		}
		w[m+2] = p
	}
	return w
}

// addLayer adds the periodic part of l, sampled at the pupil positions shifted by
// −(x, y). The layer's screens are stored as the four planes of their band-limited
// field on a grid of half the sample spacing (see step), and a sample between the
// nodes of that grid is the separable six-point Lagrange interpolation of its 6×6
// nodes. On the half-spacing grid the screen's whole band lies below half the
// Nyquist frequency, where the interpolation is nearly exact (at the screen's own
// Nyquist frequency and the worst offset its amplitude response is 0.95; our own
// evaluation of the interpolation kernel): the phase's statistics are the same at
// every sub-sample offset, and its change between frames is that of the
// band-limited screen translated exactly (TestTemporalStructureFunction).
//
// The shift is the same for every sample, so the weights are computed once. Each
// output row combines six rows of nodes per column parity (combine6, both screens
// blended by cos θ and sin θ) into rowBuf, then combines six nodes along the row
// (taps6Add); vector kernels where the CPU has them.
func (a *Atmosphere) addLayer(l *layer, out []float64) {
	n, s, stride := a.p.N, a.size, a.stride
	u := -l.x / a.p.Scale
	v := -l.y / a.p.Scale
	u -= math.Floor(u/float64(s)) * float64(s)
	v -= math.Floor(v/float64(s)) * float64(s)
	bx, hx, wx := stencil(u, s)
	by, hy, wy := stencil(v, s)
	sn, cs := math.Sincos(l.theta())
	// The vertical weights and the blend are applied in float32, like the screens;
	// the OPD of one layer keeps 7 significant digits, the sum is float64.
	var cf, ct [6]float32
	for m, w := range wy {
		cf[m], ct[m] = float32(cs*w), float32(sn*w)
	}
	var ha, hb [3]float64
	for j := range ha {
		ha[j], hb[j] = l.weight*wx[2*j], l.weight*wx[2*j+1]
	}
	plane := stride * stride
	w := len(a.rowBuf[0])
	// Node m of a column (m = 0 … 5) is fine row 2by + hy + m: coarse row by + (hy+m)/2
	// of the planes with row parity (hy+m)%2.
	var rowOff [2][6]int
	for p := range rowOff {
		for m := range rowOff[p] {
			k := hy + m
			rowOff[p][m] = (2*(k&1)+p)*plane + (by+k>>1)*stride + bx
		}
	}
	// Along a row, node m of output sample i is fine column 2(bx+i) + hx + m: the
	// even nodes come from one parity and the odd ones from the other, the first
	// of each at coarse column i, or i+1 for column parity 0 when hx = 1.
	even, odd := a.rowBuf[0], a.rowBuf[1]
	if hx == 1 {
		even, odd = a.rowBuf[1], a.rowBuf[0][1:]
	}
	var sf, st [6][]float32
	for iy := 0; iy < n; iy++ {
		for p, buf := range a.rowBuf {
			for m, off := range rowOff[p] {
				off += iy * stride
				sf[m], st[m] = l.from[off:off+w], l.to[off:off+w]
			}
			combine6(buf, false, sf, cf)
			combine6(buf, true, st, ct)
		}
		taps6Add(out[iy*n:iy*n+n], even[:n+2], odd[:n+2], ha, hb)
	}
}
