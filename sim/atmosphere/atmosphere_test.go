package atmosphere

import (
	"fmt"
	"math"
	"math/cmplx"
	"math/rand/v2"
	"testing"

	"stillsky/sim/optics"
)

func pupil(t testing.TB, d float64, n int) *optics.Pupil {
	t.Helper()
	p, err := optics.NewPupil(optics.PupilConfig{Diameter: d, N: n})
	if err != nil {
		t.Fatal(err)
	}
	return p
}

// defaultConfig is the turbulence of the default scenario (sim/scenario, default):
// r0 0.12 m, L0 25 m, three layers.
func defaultConfig() Config {
	return Config{R0: 0.12, L0: 25, Seed: 1, Layers: []LayerConfig{
		{Altitude: 0, Fraction: 0.60, WindSpeed: 6, WindDirectionDeg: 0},
		{Altitude: 4000, Fraction: 0.25, WindSpeed: 10, WindDirectionDeg: 60},
		{Altitude: 10000, Fraction: 0.15, WindSpeed: 15, WindDirectionDeg: 135},
	}}
}

func newAtm(t testing.TB, c Config, p *optics.Pupil) *Atmosphere {
	t.Helper()
	a, err := New(c, p)
	if err != nil {
		t.Fatal(err)
	}
	return a
}

// Fried 1966; Roddier 1981: r0 ∝ λ^(6/5) and r0 ∝ (cos z)^(3/5). R0At follows the
// formula, and the phase structure function of the OPD converted to phase at 1.65 µm,
// 30° from the zenith, matches 6.88 (r/r0(λ))^(5/3) within 10% (Fried 1966) over
// 2 to 6 samples, averaged over 24 independent atmospheres.
func TestR0Scaling(t *testing.T) {
	const lambda, z = 1.65e-6, 30.0
	c := Config{R0: 0.1, L0: 1e4, ZenithDeg: z, Layers: []LayerConfig{{Fraction: 0.7}, {Fraction: 0.3, WindSpeed: 5}}}
	p := pupil(t, 2, 64)
	want := 0.1 * math.Pow(math.Cos(z*math.Pi/180), 0.6) * math.Pow(lambda/500e-9, 1.2)
	a := newAtm(t, c, p)
	if got := a.R0At(lambda); math.Abs(got-want) > 1e-12 {
		t.Fatalf("R0At(%g) = %g, want %g", lambda, got, want)
	}
	if got := a.R0At(500e-9); math.Abs(got-0.1*math.Pow(math.Cos(z*math.Pi/180), 0.6)) > 1e-15 {
		t.Errorf("R0At(500 nm) = %g", got)
	}
	const count, maxLag = 24, 6
	n := p.N
	opd := make([]float64, n*n)
	d := make([]float64, maxLag+1)
	k := 2 * math.Pi / lambda
	for seed := int64(0); seed < count; seed++ {
		c.Seed = seed
		newAtm(t, c, p).OPD(opd)
		for r := 1; r <= maxLag; r++ {
			var sum float64
			for y := 0; y < n; y++ {
				for x := 0; x+r < n; x++ {
					a := k * (opd[y*n+x+r] - opd[y*n+x])
					b := k * (opd[(x+r)*n+y] - opd[x*n+y])
					sum += a*a + b*b
				}
			}
			d[r] += sum / float64(2*n*(n-r)*count)
		}
	}
	for r := 2; r <= maxLag; r++ {
		w := 6.88 * math.Pow(float64(r)*p.Scale/want, 5.0/3)
		t.Logf("D(%d samples) at %.2g m: %.4g rad², want %.4g (%+.1f%%)", r, lambda, d[r], w, 100*(d[r]/w-1))
		if math.Abs(d[r]/w-1) > 0.10 {
			t.Errorf("D(%d) = %.4g rad² at %g m, want %.4g within 10%%", r, d[r], lambda, w)
		}
	}
}

// freeze stops the screen rotation so that the flow is a pure translation.
func freeze(a *Atmosphere) {
	for _, l := range a.layers {
		l.period = math.Inf(1)
		l.elapsed = 0
	}
}

// Frozen flow (Taylor's hypothesis, common practice): after the wind has carried the
// layer by a whole number of samples, the OPD is the earlier OPD translated, up to a
// piston (the subharmonic waves are evaluated without their grid mean).
func TestFrozenFlowTranslation(t *testing.T) {
	const n = 48
	p := pupil(t, 1.2, n)
	for _, c := range []struct {
		dir    float64
		dx, dy int
	}{{0, 3, 0}, {90, 0, 3}, {180, -2, 0}, {270, 0, -5}} {
		t.Run(fmt.Sprintf("towards-%g-deg", c.dir), func(t *testing.T) {
			cfg := Config{R0: 0.1, L0: 20, Seed: 5, Layers: []LayerConfig{{Fraction: 1, WindSpeed: 10, WindDirectionDeg: c.dir}}}
			a := newAtm(t, cfg, p)
			freeze(a)
			a.Advance(0.0123) // start from a sub-sample position
			before, after := make([]float64, n*n), make([]float64, n*n)
			a.OPD(before)
			shift := math.Hypot(float64(c.dx), float64(c.dy))
			a.Advance(shift * p.Scale / 10)
			a.OPD(after)
			rms := optics.ResidualRMS(p, before)
			var diffs []float64
			for y := 0; y < n; y++ {
				for x := 0; x < n; x++ {
					xs, ys := x-c.dx, y-c.dy
					if xs < 0 || ys < 0 || xs >= n || ys >= n {
						continue
					}
					diffs = append(diffs, after[y*n+x]-before[ys*n+xs])
				}
			}
			var piston float64
			for _, d := range diffs {
				piston += d / float64(len(diffs))
			}
			worst := 0.0
			for _, d := range diffs {
				worst = math.Max(worst, math.Abs(d-piston))
			}
			if worst > 1e-6*rms {
				t.Errorf("wind towards %g°: translated OPD differs by %.3g m (rms %.3g m)", c.dir, worst, rms)
			}
		})
	}
}

// corr is the normalised correlation of two maps.
func corr(a, b []float64) float64 {
	var ab, aa, bb float64
	for i := range a {
		ab += a[i] * b[i]
		aa += a[i] * a[i]
		bb += b[i] * b[i]
	}
	return ab / math.Sqrt(aa*bb)
}

// laplacian is the discrete Laplacian of an n×n map on its interior. Its spectrum
// f⁴Φ(f) rises with f, so unlike the phase it decorrelates within a few samples and
// a correlation measured on it has many degrees of freedom.
func laplacian(m []float64, n int) []float64 {
	out := make([]float64, 0, (n-2)*(n-2))
	for y := 1; y < n-1; y++ {
		for x := 1; x < n-1; x++ {
			out = append(out, m[y*n+x-1]+m[y*n+x+1]+m[(y-1)*n+x]+m[(y+1)*n+x]-4*m[y*n+x])
		}
	}
	return out
}

// A long run over several screen lengths: the frame-to-frame change stays steady
// through every wrap of the periodic screen and every change of screen (no jump),
// and the flow does not come back to the same turbulence. After one crossing time
// the pupil sees the same samples of the periodic screens; the turbulence there
// correlates as sin θ cos θ, 1/π on average, where a plain periodic screen would give
// 1 (own derivation, see doc.go), and two crossings apart it is 0. The correlation is
// taken on the Laplacian of the OPD (small scales, many degrees of freedom).
func TestLongRunNoJumpNoRepeat(t *testing.T) {
	const n, dt = 32, 1e-3
	p := pupil(t, 1.6, n)
	v := p.Scale / dt
	a := newAtm(t, Config{R0: 0.1, L0: 30, Seed: 3, Layers: []LayerConfig{{Fraction: 1, WindSpeed: v}}}, p)
	s := a.ScreenSize()
	frames := 3*s + 1
	lap := make([][]float64, frames)
	prev, cur := make([]float64, n*n), make([]float64, n*n)
	d := make([]float64, n*n)
	a.OPD(prev)
	rms := make([]float64, frames)
	for k := 1; k < frames; k++ {
		a.Advance(dt)
		a.OPD(cur)
		for i := range d {
			d[i] = cur[i] - prev[i]
		}
		rms[k] = optics.ResidualRMS(p, d)
		lap[k] = laplacian(cur, n)
		prev, cur = cur, prev
	}
	var mean float64
	for _, r := range rms[1:] {
		mean += r / float64(frames-1)
	}
	for k, r := range rms[1:] {
		if r > 1.35*mean || r < mean/1.35 {
			t.Errorf("frame %d: change %.3g m rms, run mean %.3g m: a jump", k+1, r, mean)
		}
	}
	var c1, c2 float64
	for k := 1; k <= s; k++ {
		c1 += corr(lap[k], lap[k+s]) / float64(s)
		c2 += corr(lap[k], lap[k+2*s]) / float64(s)
	}
	t.Logf("screen %d samples: frame change %.3g m rms; correlation one crossing later %.3f (1/π = %.3f), two crossings later %.3f", s, mean, c1, 1/math.Pi, c2)
	if math.Abs(c1-1/math.Pi) > 0.06 {
		t.Errorf("correlation one crossing later %.3f, want 1/π = %.3f within 0.06", c1, 1/math.Pi)
	}
	if math.Abs(c2) > 0.06 {
		t.Errorf("correlation two crossings later %.3f, want 0 within 0.06", c2)
	}
}

// The same seed and the same sequence of steps give the same turbulence; how the
// time is sliced into steps does not change it beyond rounding.
func TestReproducible(t *testing.T) {
	p := pupil(t, 3.6, 48)
	c := defaultConfig()
	a, b, other := newAtm(t, c, p), newAtm(t, c, p), newAtm(t, Config{R0: c.R0, L0: c.L0, Layers: c.Layers, Seed: 2}, p)
	for k := 0; k < 500; k++ {
		a.Advance(2e-3)
		b.Advance(1e-3)
		b.Advance(1e-3)
		other.Advance(2e-3)
	}
	oa, ob, oo := make([]float64, 48*48), make([]float64, 48*48), make([]float64, 48*48)
	a.OPD(oa)
	b.OPD(ob)
	other.OPD(oo)
	rms := optics.ResidualRMS(p, oa)
	for i := range oa {
		if math.Abs(oa[i]-ob[i]) > 1e-9*rms {
			t.Fatalf("sample %d: %g after 2 ms steps, %g after 1 ms steps", i, oa[i], ob[i])
		}
	}
	if corr(oa, oo) > 0.9 {
		t.Errorf("a different seed gave nearly the same turbulence")
	}
}

func TestAdvanceAndOPDAllocateNothing(t *testing.T) {
	p := pupil(t, 3.6, 48)
	a := newAtm(t, defaultConfig(), p)
	out := make([]float64, 48*48)
	if n := testing.AllocsPerRun(200, func() { a.Advance(1e-3); a.OPD(out) }); n != 0 {
		t.Errorf("%v allocations per frame, want 0", n)
	}
}

func TestNewRejects(t *testing.T) {
	p := pupil(t, 1, 16)
	good := Config{R0: 0.1, L0: 20, Layers: []LayerConfig{{Fraction: 1, WindSpeed: 5}}}
	bad := map[string]func(*Config){
		"r0 zero":      func(c *Config) { c.R0 = 0 },
		"r0 NaN":       func(c *Config) { c.R0 = math.NaN() },
		"L0 negative":  func(c *Config) { c.L0 = -1 },
		"zenith 85":    func(c *Config) { c.ZenithDeg = 85 },
		"no layers":    func(c *Config) { c.Layers = nil },
		"fraction sum": func(c *Config) { c.Layers = []LayerConfig{{Fraction: 0.5}} },
		"fraction 0":   func(c *Config) { c.Layers = []LayerConfig{{Fraction: 0}, {Fraction: 1}} },
		"wind -1":      func(c *Config) { c.Layers = []LayerConfig{{Fraction: 1, WindSpeed: -1}} },
		"altitude NaN": func(c *Config) { c.Layers = []LayerConfig{{Fraction: 1, Altitude: math.NaN()}} },
		"dir Inf":      func(c *Config) { c.Layers = []LayerConfig{{Fraction: 1, WindDirectionDeg: math.Inf(1)}} },
	}
	for name, f := range bad {
		t.Run(name, func(t *testing.T) {
			c := good
			c.Layers = append([]LayerConfig(nil), good.Layers...)
			f(&c)
			if _, err := New(c, p); err == nil {
				t.Errorf("%s: New accepted %+v", name, c)
			}
		})
	}
}

// BenchmarkOPD is the default scenario: 3.6 m, 96 samples across, three layers.
func BenchmarkOPD(b *testing.B) {
	p := pupil(b, 3.6, 96)
	a := newAtm(b, defaultConfig(), p)
	out := make([]float64, 96*96)
	b.ReportAllocs()
	for b.Loop() {
		a.OPD(out)
	}
}

// BenchmarkFrame is one 1 kHz frame of the default scenario: Advance (with its share
// of the next screens' generation) and OPD.
func BenchmarkFrame(b *testing.B) {
	p := pupil(b, 3.6, 96)
	a := newAtm(b, defaultConfig(), p)
	out := make([]float64, 96*96)
	b.ReportAllocs()
	for b.Loop() {
		a.Advance(1e-3)
		a.OPD(out)
	}
}

// A layer without wind stays put however long the run (frozen flow with v = 0).
func TestStillLayer(t *testing.T) {
	p := pupil(t, 1, 16)
	a := newAtm(t, Config{R0: 0.1, L0: 20, Layers: []LayerConfig{{Fraction: 1}}}, p)
	before, after := make([]float64, 256), make([]float64, 256)
	a.OPD(before)
	for k := 0; k < 100; k++ {
		a.Advance(10)
	}
	a.OPD(after)
	for i := range before {
		if before[i] != after[i] {
			t.Fatalf("sample %d moved from %g to %g", i, before[i], after[i])
		}
	}
}

// Taylor's frozen flow (common practice) with the Kolmogorov structure function
// D(s) = 6.88 (s/r0)^(5/3) (Fried 1966), checked through the change of the phase over
// the pupil grid in a time τ, after removing its least-squares plane (piston and
// tilts, which carry few degrees of freedom and would make the estimate noisy). For
// one layer moving by r, Δ(x) = φ(x − r) − φ(x) has the pair structure function
// S(ρ) = ⟨(Δ(x) − Δ(x + ρ))²⟩ = 2D(r) + 2D(ρ) − D(|ρ + r|) − D(|ρ − r|), so the mean
// residual is ½⟨S⟩ − Σ_u (−½⟨u(x) u(x') S(x − x')⟩) over sample pairs, u the unit
// tilt regressors (our derivation); independent layers add with their Cn² fractions.
// This checks wind speeds and directions, Cn² weights and sub-sample shifts together,
// within 10% once the layers have moved several samples. Over shifts of about one
// sample the sampled screens cannot follow the continuum, having no power above the
// grid's Nyquist frequency (see doc.go); the deficit there (about −13% at 0.4 to 1.6
// samples) is logged, not checked. TestTaylorFrozenFlow checks those shifts against
// the band-limited screen itself.
func TestTemporalStructureFunction(t *testing.T) {
	const n, seeds = 64, 8
	p := pupil(t, 3.2, n)
	c := Config{R0: 0.15, L0: 1e4, Layers: []LayerConfig{
		{Fraction: 0.5, WindSpeed: 4, WindDirectionDeg: 20},
		{Fraction: 0.3, WindSpeed: 9, WindDirectionDeg: 150},
		{Fraction: 0.2, WindSpeed: 16, WindDirectionDeg: 260},
	}}
	k := 2 * math.Pi / Wavelength500
	kol := func(s float64) float64 { return 6.88 * math.Pow(s/c.R0, 5.0/3) }
	tilt := func(i int) float64 { return unitTilt(i, n) }
	rng := rand.New(rand.NewPCG(1, 1))
	before, after, diff := make([]float64, n*n), make([]float64, n*n), make([]float64, n*n)
	for _, step := range []struct {
		tau     float64
		checked bool
	}{{0.005, false}, {0.02, false}, {0.05, true}, {0.08, true}} {
		tau := step.tau
		var got float64
		for seed := int64(0); seed < seeds; seed++ {
			c.Seed = seed
			a := newAtm(t, c, p)
			a.Advance(0.0137 * float64(seed+1))
			a.OPD(before)
			a.Advance(tau)
			a.OPD(after)
			for i := range diff {
				diff[i] = after[i] - before[i]
			}
			for _, d := range flatten(k, diff, n) {
				got += d * d / float64(n*n*seeds)
			}
		}
		var want float64
		const pairs = 100000
		for m := 0; m < pairs; m++ {
			x1, y1, x2, y2 := rng.IntN(n), rng.IntN(n), rng.IntN(n), rng.IntN(n)
			rx, ry := float64(x1-x2)*p.Scale, float64(y1-y2)*p.Scale
			var s float64
			for _, l := range c.Layers {
				dir := l.WindDirectionDeg * math.Pi / 180
				sx, sy := l.WindSpeed*tau*math.Cos(dir), l.WindSpeed*tau*math.Sin(dir)
				s += l.Fraction * (2*kol(math.Hypot(sx, sy)) + 2*kol(math.Hypot(rx, ry)) -
					kol(math.Hypot(rx+sx, ry+sy)) - kol(math.Hypot(rx-sx, ry-sy)))
			}
			want += (s/2 + (tilt(x1)*tilt(x2)+tilt(y1)*tilt(y2))*s/2) / pairs
		}
		t.Logf("τ = %g s: change without piston and tilt %.4g rad², frozen flow %.4g rad² (%+.1f%%)", tau, got, want, 100*(got/want-1))
		if step.checked && math.Abs(got/want-1) > 0.10 {
			t.Errorf("τ = %g s: %.4g rad², want %.4g within 10%%", tau, got, want)
		}
	}
}

// unitTilt is the least-squares tilt regressor along one axis of an n-sample grid:
// zero mean and unit mean square.
func unitTilt(i, n int) float64 {
	return (float64(i) - float64(n-1)/2) / math.Sqrt((float64(n*n)-1)/12)
}

// flatten returns k·m, an n×n map, less its least-squares piston and tilts.
func flatten(k float64, m []float64, n int) []float64 {
	var p, ax, ay float64
	for i, v := range m {
		p += k * v / float64(n*n)
		ax += k * v * unitTilt(i%n, n) / float64(n*n)
		ay += k * v * unitTilt(i/n, n) / float64(n*n)
	}
	out := make([]float64, len(m))
	for i, v := range m {
		out[i] = k*v - p - ax*unitTilt(i%n, n) - ay*unitTilt(i/n, n)
	}
	return out
}

// layerModes calls mode(fx, fy, σ²) for every plane wave of a layer's screens, the
// FFT frequencies and the subharmonics, frequencies in cycles per metre and σ² the
// variance of the wave's amplitude along each of its real and imaginary parts.
func layerModes(a *Atmosphere, mode func(fx, fy, variance float64)) {
	g := a.gen
	s := g.c.Size
	signed := func(k int) float64 {
		if k > s/2 {
			k -= s
		}
		return float64(k)
	}
	for ky := 0; ky < s; ky++ {
		for kx := 0; kx < s; kx++ {
			amp := g.amp[ky*s+kx]
			mode(signed(kx)*a.df, signed(ky)*a.df, amp*amp)
		}
	}
	for p := 0; p < g.levels; p++ {
		dfp := a.df / math.Pow(3, float64(p+1))
		for i := 0; i < 3; i++ {
			for j := 0; j < 3; j++ {
				sd := real(g.sh[p][i][j])
				mode(float64(i-1)*dfp, float64(j-1)*dfp, sd*sd)
			}
		}
	}
}

// gridMeans returns the means over the first `count` of n grid samples (spacing dx)
// of e(x) = exp(2πi f·x) and, over all n, of e(x) times the unit tilt.
func gridMeans(f, dx float64, n, count int) (m, t complex128) {
	for i := 0; i < n; i++ {
		sn, cs := math.Sincos(2 * math.Pi * f * float64(i) * dx)
		if i < count {
			m += complex(cs, sn) / complex(float64(count), 0)
		}
		t += complex(cs, sn) * complex(unitTilt(i, n)/float64(n), 0)
	}
	return m, t
}

// means memoises gridMeans over the few distinct frequencies of a layer's waves.
type means map[[2]float64][2]complex128

func (c means) of(f, dx float64, n, count int) (m, t complex128) {
	k := [2]float64{f, float64(count)}
	if v, ok := c[k]; ok {
		return v[0], v[1]
	}
	m, t = gridMeans(f, dx, n, count)
	c[k] = [2]complex128{m, t}
	return m, t
}

func abs2(z complex128) float64 { return real(z * cmplx.Conj(z)) }

// spectralD returns, in rad² at 500 nm, the spatial structure function of one
// layer at the separation r = (rx, ry) metres from its spectrum,
// D(r) = Σ_f 2σ_f²(1 − cos 2πf·r) (Wiener–Khinchin; Roddier 1981), and the mean
// square over the n×n grid of the change of the layer translated by r once the
// piston and tilts of the change are removed: each wave's term times
// 1 − |⟨e_f, 1⟩|² − |⟨e_f, t_x⟩|² − |⟨e_f, t_y⟩|², the brackets grid means of
// e_f = exp(2πi f·x) against the orthonormal piston and tilt regressors (the
// least-squares residual of a plane wave; our derivation).
func spectralD(a *Atmosphere, n int, rx, ry float64) (d, flat float64) {
	c := means{}
	layerModes(a, func(fx, fy, variance float64) {
		mx, tx := c.of(fx, a.p.Scale, n, n)
		my, ty := c.of(fy, a.p.Scale, n, n)
		v := 2 * variance * (1 - math.Cos(2*math.Pi*(fx*rx+fy*ry)))
		d += v
		flat += v * (1 - abs2(mx*my) - abs2(tx*my) - abs2(mx*ty))
	})
	return d, flat
}

// spectralPairD is the spatial structure function at r samples along x of the
// layer's maps once their piston and tilts are removed, ψ = φ − ⟨φ,1⟩ − ⟨φ,t_x⟩t_x
// − ⟨φ,t_y⟩t_y, averaged over the pairs of the n×n grid: for one wave,
// ψ(x+r) − ψ(x) = e_y(y)·A(x) − c·r/σ_n with A(x) = e_x(x+r) − e_x(x),
// c = ⟨e_f, t_x⟩ and r/σ_n the step of the unit tilt, whose mean square over the
// pairs is |A|² − 2(r/σ_n)·Re(c̄·⟨e_y⟩·Ā) + |c|²(r/σ_n)², Ā the mean of A over
// x < n − r (our derivation).
func spectralPairD(a *Atmosphere, n, r int) float64 {
	step := float64(r) / math.Sqrt((float64(n*n)-1)/12)
	var d float64
	cm := means{}
	layerModes(a, func(fx, fy, variance float64) {
		sn, cs := math.Sincos(2 * math.Pi * fx * float64(r) * a.p.Scale)
		shift := complex(cs-1, sn)
		mPairs, tx := cm.of(fx, a.p.Scale, n, n-r)
		my, _ := cm.of(fy, a.p.Scale, n, n)
		c := tx * my
		mean := shift * mPairs
		d += variance * (abs2(shift) - 2*step*real(cmplx.Conj(c)*my*mean) + abs2(c)*step*step)
	})
	return d
}

// Taylor's frozen-flow hypothesis (Taylor, Proc. R. Soc. A 164 (1938) 476; Roddier
// 1981): the temporal structure function of one layer carried by the wind at v,
// D(τ) = ⟨(φ(x, t+τ) − φ(x, t))²⟩, is its spatial one at the separation vτ, whatever
// fraction of a sample vτ is and wherever between the samples the layer starts.
// Measured on the OPD of a single frozen layer (no screen blending), along the grid
// axis and at 30° to it, from four starting offsets, with the piston and tilts of
// each change removed (they carry few degrees of freedom and would make the estimate
// noisy; the subharmonics' grid mean is not simulated anyway, see waveTable), within
// 2.5% of the spatial structure function at vτ from the screen's spectrum, filtered
// the same way (see spectralD). That spatial function is checked against the one
// measured on the same maps (also without piston and tilts) at whole-sample
// separations, and its unfiltered form against the Kolmogorov 6.88 (r/r0)^(5/3)
// (Fried 1966) at several samples, below which the power above the grid's Nyquist
// frequency, which no sampled screen has, is missing. Bilinear interpolation of the
// samples, which the bench used before, falls 8% to 21% short on average over the
// starting offsets, 39% at the worst (our evaluation of its transfer function on a
// Kolmogorov spectrum).
func TestTaylorFrozenFlow(t *testing.T) {
	const n, seeds, v = 64, 48, 10.0
	p := pupil(t, 3.2, n)
	k := 2 * math.Pi / Wavelength500
	shifts := []float64{0.1, 0.25, 0.5, 0.75, 1, 1.5, 2, 3.25}
	starts := []float64{0, 64.3, 128.5, 192.85} // samples along the wind
	const maxLag = 4
	for _, dir := range []float64{0, 30} {
		c := Config{R0: 0.15, L0: 1e4, Layers: []LayerConfig{{Fraction: 1, WindSpeed: v, WindDirectionDeg: dir}}}
		cs, sn := math.Cos(dir*math.Pi/180), math.Sin(dir*math.Pi/180)
		perSeed := make([][]float64, len(shifts))
		spatial := make([][]float64, maxLag+1)
		var a *Atmosphere
		before, after, diff := make([]float64, n*n), make([]float64, n*n), make([]float64, n*n)
		for seed := int64(0); seed < seeds; seed++ {
			c.Seed = seed
			a = newAtm(t, c, p)
			freeze(a)
			at := 0.0
			move := func(to float64) {
				a.Advance((to - at) * p.Scale / v)
				at = to
			}
			sums, pairs := make([]float64, len(shifts)), make([]float64, maxLag+1)
			for _, s0 := range starts {
				move(s0)
				a.OPD(before)
				flat := flatten(k, before, n)
				for r := 1; r <= maxLag; r++ {
					for y := 0; y < n; y++ {
						for x := 0; x+r < n; x++ {
							d := flat[y*n+x+r] - flat[y*n+x]
							pairs[r] += d * d / float64(n*(n-r)*len(starts))
						}
					}
				}
				for i, s := range shifts {
					move(s0 + s)
					a.OPD(after)
					for j := range diff {
						diff[j] = after[j] - before[j]
					}
					for _, d := range flatten(k, diff, n) {
						sums[i] += d * d / float64(n*n*len(starts))
					}
				}
			}
			for i := range shifts {
				perSeed[i] = append(perSeed[i], sums[i])
			}
			for r := 1; r <= maxLag; r++ {
				spatial[r] = append(spatial[r], pairs[r])
			}
		}
		for i, s := range shifts {
			got, se := meanSE(perSeed[i])
			d, want := spectralD(a, n, s*p.Scale*cs, s*p.Scale*sn)
			t.Logf("wind %g°, vτ = %.2f samples: D(τ) without piston and tilt %.4g rad², spatial D(vτ) %.4g, filtered %.4g (%+.1f%% ± %.1f%%)",
				dir, s, got, d, want, 100*(got/want-1), 100*se/want)
			if math.Abs(got/want-1) > 0.03 {
				t.Errorf("wind %g°, vτ = %.2f samples: D(τ) = %.4g rad², want the spatial %.4g within 3%%", dir, s, got, want)
			}
		}
		if dir != 0 {
			continue // the spatial function is the same in every direction
		}
		for r := 1; r <= maxLag; r++ {
			got, se := meanSE(spatial[r])
			want := spectralPairD(a, n, r)
			t.Logf("spatial D(%d samples) without piston and tilt: measured %.4g rad², from the spectrum %.4g (%+.1f%% ± %.1f%%)", r, got, want, 100*(got/want-1), 100*se/want)
			if math.Abs(got/want-1) > 0.05 {
				t.Errorf("spatial D(%d samples) measured %.4g rad², from the spectrum %.4g: not within 5%%", r, got, want)
			}
		}
		for _, r := range []float64{4, 8} {
			d, _ := spectralD(a, n, r*p.Scale, 0)
			kol := 6.88 * math.Pow(r*p.Scale/c.R0, 5.0/3)
			t.Logf("spatial D(%g samples) from the spectrum %.4g rad², Kolmogorov %.4g (%+.1f%%)", r, d, kol, 100*(d/kol-1))
			if math.Abs(d/kol-1) > 0.10 {
				t.Errorf("spatial D(%g samples) from the spectrum %.4g rad², Kolmogorov %.4g: not within 10%%", r, d, kol)
			}
		}
	}
}

// meanSE returns the mean of x and its standard error.
func meanSE(x []float64) (mean, se float64) {
	for _, v := range x {
		mean += v / float64(len(x))
	}
	var ss float64
	for _, v := range x {
		ss += (v - mean) * (v - mean)
	}
	return mean, math.Sqrt(ss / float64(len(x)-1) / float64(len(x)))
}
