package controller

import (
	"errors"
	"fmt"
	"math"
	"math/cmplx"
	"math/rand/v2"
	"testing"
	"time"

	"gonum.org/v1/gonum/mat"

	"stillsky/controller/mvm"
)

// identityParams returns parameters for a plant whose sensor sees e = φ − c
// directly on n channels: M = −I, so R = −M⁺ = I.
func identityParams(t testing.TB, n int, gain, leak, stroke float64) *Params {
	t.Helper()
	id := mat.NewDense(n, n, nil)
	for i := 0; i < n; i++ {
		id.Set(i, i, 1)
	}
	r, err := ReconstructorFromMatrix(id, time.Time{})
	if err != nil {
		t.Fatal(err)
	}
	p, err := NewParams(ParamsConfig{Reconstructor: r, Gain: gain, Leak: leak, Stroke: stroke, StrehlWavelength: 1.65e-6})
	if err != nil {
		t.Fatal(err)
	}
	return p
}

// delayPlant is the model of docs/control-law.md: the sensor sees
// e_k = φ_k − c_{k−d}.
type delayPlant struct{ queue []float32 }

func newDelayPlant(d int) *delayPlant { return &delayPlant{queue: make([]float32, d)} }

// sense returns e_k for disturbance phi; record stores c_k.
func (p *delayPlant) sense(phi float64) float32 { return float32(phi) - p.queue[0] }
func (p *delayPlant) record(c float32)          { p.queue = append(p.queue[1:], c) }

// runScalar closes the loop on the delay plant for len(phi) frames and returns
// the error sequence e_k. step maps e_k to c_k.
func runScalar(d int, phi []float64, step func(e float32) float32) []float64 {
	plant := newDelayPlant(d)
	out := make([]float64, len(phi))
	for k, f := range phi {
		e := plant.sense(f)
		out[k] = float64(e)
		plant.record(step(e))
	}
	return out
}

func loopStep(t testing.TB, l *Loop) func(float32) float32 {
	s, c := make([]float32, 1), make([]float32, 1)
	return func(e float32) float32 {
		s[0] = e
		if r := l.Step(s, c); !r.OK() {
			t.Fatalf("frame rejected: %v", r.Status)
		}
		return c[0]
	}
}

func constant(v float64, n int) []float64 {
	out := make([]float64, n)
	for i := range out {
		out[i] = v
	}
	return out
}

// Steady-state residual of a constant disturbance: ℓ/(ℓ + g)
// (docs/control-law.md, final-value theorem on E(z) at z = 1).
func TestSteadyStateResidual(t *testing.T) {
	for _, c := range []struct {
		d          int
		gain, leak float64
	}{{1, 0.5, 0.01}, {1, 0.3, 0.1}, {2, 0.4, 0.05}, {3, 0.3, 0.02}} {
		t.Run(fmt.Sprintf("d=%d g=%g leak=%g", c.d, c.gain, c.leak), func(t *testing.T) {
			l, err := NewLoop(identityParams(t, 1, c.gain, c.leak, 1e3))
			if err != nil {
				t.Fatal(err)
			}
			e := runScalar(c.d, constant(1, 3000), loopStep(t, l))
			want := c.leak / (c.leak + c.gain)
			if got := e[len(e)-1]; math.Abs(got-want) > 1e-5 {
				t.Errorf("d=%d g=%g ℓ=%g: residual %.7f, want ℓ/(ℓ+g) = %.7f", c.d, c.gain, c.leak, got, want)
			}
		})
	}
}

// Stability limit of the pure integrator, g_max = 2 sin(π/(2(2d − 1)))
// (docs/control-law.md: a root of z^(d−1) (z − 1) + g = 0 on the unit circle).
func TestStabilityLimit(t *testing.T) {
	for d := 1; d <= 3; d++ {
		gmax := 2 * math.Sin(math.Pi/(2*(2*float64(d)-1)))
		for _, c := range []struct {
			factor float64
			stable bool
		}{{0.95, true}, {1.05, false}} {
			t.Run(fmt.Sprintf("d=%d/%.2f_gmax", d, c.factor), func(t *testing.T) {
				g := c.factor * gmax
				var step func(float32) float32
				if g < MaxGain {
					l, err := NewLoop(identityParams(t, 1, g, 0, 1e30))
					if err != nil {
						t.Fatal(err)
					}
					step = loopStep(t, l)
				} else {
					// Params refuse g >= 2, so drive the integrator Step uses directly.
					state, lo, hi := []float32{0}, []float32{-1e30}, []float32{1e30}
					step = func(e float32) float32 {
						integrate(state, []float32{e}, lo, hi, 1, float32(g))
						return state[0]
					}
				}
				e := runScalar(d, constant(1, 3000), step)
				peak := 0.0
				for _, v := range e[len(e)-200:] {
					peak = math.Max(peak, math.Abs(v))
				}
				if c.stable && !(peak < 1e-3) {
					t.Errorf("d=%d g=%.4f (%.2f g_max): |e| = %.3g at the end, want convergence", d, g, c.factor, peak)
				}
				if !c.stable && !(peak > 1e3) {
					t.Errorf("d=%d g=%.4f (%.2f g_max): |e| = %.3g at the end, want divergence", d, g, c.factor, peak)
				}
			})
		}
	}
}

// Rejection of a sinusoidal disturbance: the measured error amplitude against
// |E(e^{jωT})|, E(z) = (1 − (1 − ℓ)z⁻¹)/(1 − (1 − ℓ)z⁻¹ + g z⁻ᵈ), derived in
// docs/control-law.md from c_k = (1 − ℓ)c_{k−1} + g e_k, e_k = φ_k − c_{k−d} (for
// ℓ = 0 the pure integrator's (1 − z⁻¹)/(1 − z⁻¹ + g z⁻ᵈ); ℓ/(ℓ + g) at z = 1).
func TestSinusoidRejection(t *testing.T) {
	for _, c := range []struct {
		d          int
		gain, leak float64
	}{{2, 0.4, 0}, {1, 0.6, 0}, {3, 0.25, 0.05}} {
		t.Run(fmt.Sprintf("d=%d g=%g leak=%g", c.d, c.gain, c.leak), func(t *testing.T) {
			for _, f := range []float64{0.005, 0.02, 0.05, 0.1, 0.2, 0.35} { // cycles per frame
				l, err := NewLoop(identityParams(t, 1, c.gain, c.leak, 1e3))
				if err != nil {
					t.Fatal(err)
				}
				w := 2 * math.Pi * f
				const settle, n = 3000, 4000
				phi := make([]float64, settle+n)
				for k := range phi {
					phi[k] = math.Sin(w * float64(k))
				}
				e := runScalar(c.d, phi, loopStep(t, l))[settle:]
				// Least-squares amplitude of e_k = a sin(ωk) + b cos(ωk).
				var ss, cc, sc, es, ec float64
				for i, v := range e {
					k := float64(settle + i)
					s, co := math.Sin(w*k), math.Cos(w*k)
					ss, cc, sc, es, ec = ss+s*s, cc+co*co, sc+s*co, es+v*s, ec+v*co
				}
				det := ss*cc - sc*sc
				a, b := (es*cc-ec*sc)/det, (ec*ss-es*sc)/det
				got := math.Hypot(a, b)
				zi := cmplx.Exp(complex(0, -w)) // z⁻¹ on the unit circle
				num := 1 - complex(1-c.leak, 0)*zi
				den := 1 - complex(1-c.leak, 0)*zi + complex(c.gain, 0)*cmplx.Pow(zi, complex(float64(c.d), 0))
				want := cmplx.Abs(num / den)
				if rel := math.Abs(got-want) / want; rel > 0.05 {
					t.Errorf("d=%d g=%g ℓ=%g f=%g: amplitude %.5f, |E| = %.5f (%.2g%% off)", c.d, c.gain, c.leak, f, got, want, 100*rel)
				} else {
					t.Logf("d=%d g=%g ℓ=%g f=%g: amplitude %.5f, |E| = %.5f (rel %.1e)", c.d, c.gain, c.leak, f, got, want, rel)
				}
			}
		})
	}
}

// recoveryFrames returns the number of frames after the disturbance ends
// (frame k0) until |e| stays below tol.
func recoveryFrames(e []float64, k0 int, tol float64) int {
	last := k0
	for k := k0; k < len(e); k++ {
		if math.Abs(e[k]) >= tol {
			last = k + 1
		}
	}
	return last - k0
}

// Anti-windup: with d = 1, g = 0.5, ℓ = 0.01 and the command clipped at ±1, a
// disturbance of 5 saturates the mirror. When it ends the integrator holds the
// clipped 1, so e_{k0+n} = −(1 − ℓ − g)ⁿ = −0.49ⁿ exactly (derived from the law in
// docs/control-law.md): |e| < 0.01 after ⌈ln 0.01 / ln 0.49⌉ = 7 frames.
// Without anti-windup the unclipped state winds up towards g(5 − 1)/ℓ and takes
// over a hundred frames to unwind.
func TestAntiWindup(t *testing.T) {
	const k0, n, g, leak, tol = 300, 700, 0.5, 0.01, 0.01
	phi := make([]float64, n)
	for k := 0; k < k0; k++ {
		phi[k] = 5
	}
	l, err := NewLoop(identityParams(t, 1, g, leak, 1))
	if err != nil {
		t.Fatal(err)
	}
	sat := 0
	s, c := make([]float32, 1), make([]float32, 1)
	withAW := runScalar(1, phi, func(e float32) float32 {
		s[0] = e
		sat += l.Step(s, c).Saturated
		return c[0]
	})
	if sat < k0-5 {
		t.Errorf("saturated frames %d, want about %d", sat, k0)
	}
	var x float64 // integrator without anti-windup, test only
	noAW := runScalar(1, phi, func(e float32) float32 {
		x = (1-leak)*x + g*float64(e)
		return float32(math.Max(-1, math.Min(1, x)))
	})
	fast, slow := recoveryFrames(withAW, k0, tol), recoveryFrames(noAW, k0, tol)
	want := int(math.Ceil(math.Log(tol) / math.Log(1-leak-g)))
	if fast != want {
		t.Errorf("anti-windup recovery %d frames, want %d", fast, want)
	}
	if slow < 10*fast {
		t.Errorf("without anti-windup recovery %d frames: want at least 10× the %d with it", slow, fast)
	}
	t.Logf("recovery to |e| < %g: %d frames with anti-windup, %d without", tol, fast, slow)
}

func TestFrameRejection(t *testing.T) {
	p := identityParams(t, 4, 0.5, 0, 1)
	nan, inf := float32(math.NaN()), float32(math.Inf(1))
	cases := []struct {
		name   string
		slopes []float32
		cmdLen int
		want   Status
		err    error
	}{
		{"short slopes", make([]float32, 3), 4, StatusSlopesLength, ErrSlopesLength},
		{"long slopes", make([]float32, 5), 4, StatusSlopesLength, ErrSlopesLength},
		{"nil slopes", nil, 4, StatusSlopesLength, ErrSlopesLength},
		{"NaN", []float32{0, nan, 0, 0}, 4, StatusNonFinite, ErrNonFinite},
		{"+Inf", []float32{0, 0, 0, inf}, 4, StatusNonFinite, ErrNonFinite},
		{"-Inf", []float32{-inf, 0, 0, 0}, 4, StatusNonFinite, ErrNonFinite},
		{"huge slopes are clipped", []float32{3e38, 3e38, 3e38, 3e38}, 4, StatusOK, nil},
		{"short command", []float32{0, 0, 0, 0}, 3, StatusCommandLength, ErrCommandLength},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			l, err := NewLoop(p)
			if err != nil {
				t.Fatal(err)
			}
			good := make([]float32, 4)
			first := l.Step([]float32{0.1, 0.2, -0.1, 0.3}, good)
			if !first.OK() {
				t.Fatal(first.Status)
			}
			cmd := make([]float32, c.cmdLen)
			r := l.Step(c.slopes, cmd)
			if r.Status != c.want || !errors.Is(r.Status.Err(), c.err) {
				t.Fatalf("status %v (%v), want %v", r.Status, r.Status.Err(), c.want)
			}
			if c.want == StatusOK {
				for _, v := range cmd {
					if !isFinite32(v) || v > 1 {
						t.Errorf("command %v escapes the limits", cmd)
					}
				}
				return
			}
			held := make([]float32, 4)
			l.Command(held)
			for i := range held {
				if held[i] != good[i] {
					t.Errorf("state changed: %v, want %v", held, good)
				}
				if c.cmdLen == 4 && cmd[i] != good[i] {
					t.Errorf("command %v, want the last good %v", cmd, good)
				}
			}
		})
	}
}

// Slopes whose reconstruction overflows float32 are rejected, never sent as Inf.
func TestOverflowRejected(t *testing.T) {
	rng := rand.New(rand.NewPCG(39, 40))
	p := randomParams(t, rng, 6, 50)
	l, _ := NewLoop(p)
	s := make([]float32, 50)
	for i := range s {
		s[i] = 3e38
	}
	cmd := make([]float32, 6)
	if r := l.Step(s, cmd); r.Status != StatusNonFinite {
		t.Errorf("status %v, want %v", r.Status, StatusNonFinite)
	}
	for _, v := range cmd {
		if v != 0 {
			t.Errorf("command %v, want the held zero", cmd)
		}
	}
}

func TestResidualEstimate(t *testing.T) {
	p := identityParams(t, 4, 0.5, 0, 1)
	l, _ := NewLoop(p)
	// With R = I, Δ = s; Δ − mean Δ = (x, −x, x, −x), so σ = 2x and the Maréchal
	// estimate is exp(−(2π·2x/λ)²) (Mahajan, JOSA 73 (1983) 860).
	const x = 20e-9
	r := l.Step([]float32{x + 1e-8, -x + 1e-8, x + 1e-8, -x + 1e-8}, make([]float32, 4))
	if math.Abs(r.ResidualRMS-2*x) > 1e-6*x {
		t.Errorf("residual rms %g, want %g", r.ResidualRMS, 2*x)
	}
	wantS := math.Exp(-math.Pow(2*math.Pi*2*x/1.65e-6, 2))
	if math.Abs(r.Strehl-wantS) > 1e-6 {
		t.Errorf("Strehl %g, want %g", r.Strehl, wantS)
	}
	wantRMS := math.Sqrt((2*math.Pow(x+1e-8, 2) + 2*math.Pow(-x+1e-8, 2)) / 4)
	if math.Abs(r.SlopeRMS-wantRMS) > 1e-6*wantRMS {
		t.Errorf("slope rms %g, want %g", r.SlopeRMS, wantRMS)
	}
	// The reference is subtracted first.
	c := p.Config()
	c.Reference = []float32{1e-8, 1e-8, 1e-8, 1e-8}
	q, err := NewParams(c)
	if err != nil {
		t.Fatal(err)
	}
	l.SetParams(q)
	r = l.Step([]float32{x + 1e-8, -x + 1e-8, x + 1e-8, -x + 1e-8}, make([]float32, 4))
	if math.Abs(r.SlopeRMS-x) > 1e-6*x {
		t.Errorf("slope rms with reference %g, want %g", r.SlopeRMS, x)
	}
}

func randomParams(t testing.TB, rng *rand.Rand, na, ns int) *Params {
	t.Helper()
	r, err := ReconstructorFromMatrix(randomDense(rng, na, ns), time.Time{})
	if err != nil {
		t.Fatal(err)
	}
	p, err := NewParams(ParamsConfig{Reconstructor: r, Gain: 0.4, Leak: 0.01, Stroke: 2, StrehlWavelength: 1e-6})
	if err != nil {
		t.Fatal(err)
	}
	return p
}

func randomSlopes(rng *rand.Rand, n int) []float32 {
	s := make([]float32, n)
	for i := range s {
		s[i] = float32(rng.NormFloat64())
	}
	return s
}

func TestChunksMatchStep(t *testing.T) {
	rng := rand.New(rand.NewPCG(31, 32))
	const na, ns = 30, 70
	p := randomParams(t, rng, na, ns)
	whole, _ := NewLoop(p)
	chunked, _ := NewLoop(p)
	a, b := make([]float32, na), make([]float32, na)
	for frame := 0; frame < 20; frame++ {
		s := randomSlopes(rng, ns)
		ra := whole.Step(s, a)
		for _, c := range [][2]int{{0, 10}, {10, 10}, {10, 45}, {45, 70}} {
			if st := chunked.StepChunk(s, c[0], c[1]); st != StatusOK {
				t.Fatalf("chunk %v: %v", c, st)
			}
		}
		rb := chunked.Finish(b)
		if !ra.OK() || !rb.OK() || ra.Saturated != rb.Saturated {
			t.Fatalf("frame %d: %+v vs %+v", frame, ra, rb)
		}
		for i := range a {
			if math.Abs(float64(a[i]-b[i])) > 1e-5*(1+math.Abs(float64(a[i]))) {
				t.Fatalf("frame %d actuator %d: step %g, chunks %g", frame, i, a[i], b[i])
			}
		}
	}
}

func TestChunkErrors(t *testing.T) {
	rng := rand.New(rand.NewPCG(33, 34))
	p := randomParams(t, rng, 5, 12)
	s := randomSlopes(rng, 12)
	bad := append([]float32(nil), s...)
	bad[7] = float32(math.NaN())
	cases := []struct {
		name   string
		slopes []float32
		chunks [][2]int
		want   Status
	}{
		{"no first chunk", s, [][2]int{{4, 12}}, StatusIncomplete},
		{"gap", s, [][2]int{{0, 4}, {5, 12}}, StatusChunkRange},
		{"backwards", s, [][2]int{{0, 6}, {6, 4}}, StatusChunkRange},
		{"past the end", s, [][2]int{{0, 6}, {6, 13}}, StatusChunkRange},
		{"missing tail", s, [][2]int{{0, 6}}, StatusIncomplete},
		{"NaN in second chunk", bad, [][2]int{{0, 6}, {6, 12}}, StatusNonFinite},
		{"short buffer", s[:11], [][2]int{{0, 6}, {6, 11}}, StatusSlopesLength},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			l, _ := NewLoop(p)
			good := make([]float32, 5)
			l.Step(s, good)
			for _, ch := range c.chunks {
				l.StepChunk(c.slopes, ch[0], ch[1])
			}
			cmd := make([]float32, 5)
			if r := l.Finish(cmd); r.Status != c.want {
				t.Fatalf("status %v, want %v", r.Status, c.want)
			}
			for i := range cmd {
				if cmd[i] != good[i] {
					t.Fatalf("command %v, want the held %v", cmd, good)
				}
			}
			// The next whole frame is fine again.
			if r := l.Step(s, cmd); !r.OK() {
				t.Errorf("next frame: %v", r.Status)
			}
		})
	}
}

// The per-frame contract (docs/hot-path.md): zero allocations per frame, including
// rejected frames and chunked frames.
func TestStepAllocatesNothing(t *testing.T) {
	rng := rand.New(rand.NewPCG(35, 36))
	p := randomParams(t, rng, 40, 90)
	l, _ := NewLoop(p)
	s, cmd := randomSlopes(rng, 90), make([]float32, 40)
	bad := append([]float32(nil), s...)
	bad[3] = float32(math.Inf(1))
	for name, f := range map[string]func(){
		"step":   func() { l.Step(s, cmd) },
		"reject": func() { l.Step(bad, cmd) },
		"short":  func() { l.Step(s[:10], cmd) },
		"chunks": func() {
			l.StepChunk(s, 0, 30)
			l.StepChunk(s, 30, 90)
			l.Finish(cmd)
		},
	} {
		if a := testing.AllocsPerRun(200, f); a != 0 {
			t.Errorf("%s: %g allocations per frame, want 0", name, a)
		}
	}
	// With the kernel's worker threads sharing the product.
	r, err := ReconstructorFromMatrix(randomDense(rng, 400, 800), time.Time{})
	if err != nil {
		t.Fatal(err)
	}
	big, err := NewParams(ParamsConfig{Reconstructor: r, Gain: 0.4, Stroke: 1, StrehlWavelength: 1e-6, Kernel: mvm.Options{Workers: 2}})
	if err != nil {
		t.Fatal(err)
	}
	defer big.Close()
	lb, _ := NewLoop(big)
	sb, cb := randomSlopes(rng, 800), make([]float32, 400)
	if a := testing.AllocsPerRun(200, func() { lb.Step(sb, cb) }); a != 0 {
		t.Errorf("two workers: %g allocations per frame, want 0", a)
	}
}

// A parameter swap never tears a frame: a chunked frame finishes with the set it
// began with. Run with -race to check the swap from another goroutine.
func TestParamsSwap(t *testing.T) {
	p1 := identityParams(t, 3, 0.5, 0, 10)
	p2, err := p1.WithGain(0.25)
	if err != nil {
		t.Fatal(err)
	}
	if p2.ControlMatrix() != p1.ControlMatrix() {
		t.Error("WithGain rebuilt the control matrix")
	}
	l, _ := NewLoop(p1)
	s := []float32{1, 1, 1}
	l.StepChunk(s, 0, 2)
	if err := l.SetParams(p2); err != nil {
		t.Fatal(err)
	}
	l.StepChunk(s, 2, 3)
	cmd := make([]float32, 3)
	l.Finish(cmd)
	if cmd[0] != 0.5 || cmd[2] != 0.5 {
		t.Errorf("command %v: want gain 0.5 of the set the frame began with", cmd)
	}
	l.Step(s, cmd)
	if cmd[0] != 0.75 {
		t.Errorf("command %v: want 0.5 + 0.25 after the swap", cmd)
	}
	if err := l.SetParams(identityParams(t, 4, 0.5, 0, 10)); err == nil {
		t.Error("params of another geometry accepted")
	}
	if err := l.SetParams(nil); err == nil {
		t.Error("nil params accepted")
	}
	if l.Params() != p2 {
		t.Error("refused set replaced the running one")
	}

	done := make(chan struct{})
	go func() {
		defer close(done)
		for i := 0; i < 2000; i++ {
			if i%2 == 0 {
				l.SetParams(p1)
			} else {
				l.SetParams(p2)
			}
		}
	}()
	for i := 0; i < 2000; i++ {
		if r := l.Step(s, cmd); !r.OK() {
			t.Fatal(r.Status)
		}
	}
	<-done
}

func TestStateControl(t *testing.T) {
	p := identityParams(t, 3, 0.5, 0, 1)
	l, _ := NewLoop(p)
	if err := l.SetCommand([]float32{0.5, 2, -3}); err != nil {
		t.Fatal(err)
	}
	got := make([]float32, 3)
	l.Command(got)
	if got[0] != 0.5 || got[1] != 1 || got[2] != -1 {
		t.Errorf("state %v, want [0.5 1 -1] (clipped to the stroke)", got)
	}
	for _, bad := range [][]float32{{0, 0}, {0, float32(math.NaN()), 0}} {
		if err := l.SetCommand(bad); err == nil {
			t.Errorf("SetCommand(%v) accepted", bad)
		}
	}
	if err := l.Command(make([]float32, 2)); err == nil {
		t.Error("Command into a short slice accepted")
	}
	l.Reset()
	l.Command(got)
	if got[0] != 0 || got[1] != 0 || got[2] != 0 {
		t.Errorf("state after Reset %v", got)
	}
	// With limits that exclude zero, Reset clips zero into them.
	c := p.Config()
	c.Lower, c.Upper = []float64{0.1, -1, -1}, []float64{1, 1, -0.2}
	q, err := NewParams(c)
	if err != nil {
		t.Fatal(err)
	}
	l.SetParams(q)
	l.Reset()
	l.Command(got)
	if got[0] != 0.1 || got[1] != 0 || got[2] != -0.2 {
		t.Errorf("state after Reset %v, want [0.1 0 -0.2]", got)
	}
}

func TestNewParamsRejects(t *testing.T) {
	rng := rand.New(rand.NewPCG(37, 38))
	svd, err := BuildReconstructor(randomDense(rng, 8, 4), ReconstructorConfig{KeepPiston: true})
	if err != nil {
		t.Fatal(err)
	}
	zonal, _ := ReconstructorFromMatrix(randomDense(rng, 4, 8), time.Time{})
	ok := ParamsConfig{Reconstructor: svd, Gain: 0.5, Leak: 0.01, Stroke: 1e-6, StrehlWavelength: 1.6e-6}
	nan := math.NaN()
	cases := []struct {
		name string
		edit func(*ParamsConfig)
	}{
		{"nil reconstructor", func(c *ParamsConfig) { c.Reconstructor = nil }},
		{"broken reconstructor", func(c *ParamsConfig) { c.Reconstructor = &Reconstructor{Slopes: 8, Actuators: 4} }},
		{"gain negative", func(c *ParamsConfig) { c.Gain = -0.1 }},
		{"gain 2", func(c *ParamsConfig) { c.Gain = 2 }},
		{"gain NaN", func(c *ParamsConfig) { c.Gain = nan }},
		{"leak negative", func(c *ParamsConfig) { c.Leak = -0.01 }},
		{"leak 1", func(c *ParamsConfig) { c.Leak = 1 }},
		{"leak NaN", func(c *ParamsConfig) { c.Leak = nan }},
		{"strehl wavelength 0", func(c *ParamsConfig) { c.StrehlWavelength = 0 }},
		{"strehl wavelength Inf", func(c *ParamsConfig) { c.StrehlWavelength = math.Inf(1) }},
		{"stroke 0", func(c *ParamsConfig) { c.Stroke = 0 }},
		{"stroke NaN", func(c *ParamsConfig) { c.Stroke = nan }},
		{"lower only", func(c *ParamsConfig) { c.Lower = []float64{0, 0, 0, 0} }},
		{"upper length", func(c *ParamsConfig) { c.Lower, c.Upper = []float64{0, 0, 0, 0}, []float64{1, 1, 1} }},
		{"lower above upper", func(c *ParamsConfig) { c.Lower, c.Upper = []float64{0, 2, 0, 0}, []float64{1, 1, 1, 1} }},
		{"lower NaN", func(c *ParamsConfig) { c.Lower, c.Upper = []float64{0, nan, 0, 0}, []float64{1, 1, 1, 1} }},
		{"upper Inf", func(c *ParamsConfig) { c.Lower, c.Upper = []float64{0, 0, 0, 0}, []float64{1, 1, math.Inf(1), 1} }},
		{"reference length", func(c *ParamsConfig) { c.Reference = make([]float32, 7) }},
		{"reference NaN", func(c *ParamsConfig) { c.Reference = []float32{0, 0, 0, float32(nan), 0, 0, 0, 0} }},
		{"modal gains length", func(c *ParamsConfig) { c.ModalGains = []float64{1, 1, 1} }},
		{"modal gain negative", func(c *ParamsConfig) { c.ModalGains = []float64{1, -1, 1, 1} }},
		{"modal gain NaN", func(c *ParamsConfig) { c.ModalGains = []float64{1, nan, 1, 1} }},
		{"modal gain × gain >= 2", func(c *ParamsConfig) { c.ModalGains = []float64{1, 4, 1, 1} }},
		{"modal gains on a matrix reconstructor", func(c *ParamsConfig) { c.Reconstructor, c.ModalGains = zonal, []float64{1, 1, 1, 1} }},
		{"kernel workers", func(c *ParamsConfig) { c.Kernel.Workers = -1 }},
		{"kernel name", func(c *ParamsConfig) { c.Kernel.Kernel = "abacus" }},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			cfg := ok
			c.edit(&cfg)
			if _, err := NewParams(cfg); err == nil {
				t.Error("accepted")
			} else {
				t.Log(err)
			}
		})
	}
	p, err := NewParams(ok)
	if err != nil {
		t.Fatal(err)
	}
	for name, f := range map[string]func() (*Params, error){
		"WithGain(2)":         func() (*Params, error) { return p.WithGain(2) },
		"WithLeak(-1)":        func() (*Params, error) { return p.WithLeak(-1) },
		"WithModalGains(len)": func() (*Params, error) { return p.WithModalGains([]float64{1}) },
	} {
		if _, err := f(); err == nil {
			t.Errorf("%s accepted", name)
		}
	}
	q, err := p.WithModalGains([]float64{1, 0.5, 0.5, 0})
	if err != nil {
		t.Fatal(err)
	}
	if q.ControlMatrix() == p.ControlMatrix() {
		t.Error("WithModalGains did not rebuild the control matrix")
	}
	if q.Gain() != 0.5 || q.Leak() != 0.01 {
		t.Errorf("derived set changed gain %g / leak %g", q.Gain(), q.Leak())
	}
	q.Close()
	q.Close()
	if _, err := q.WithGain(0.1); err == nil {
		t.Error("WithGain on a closed set accepted")
	}
}

// Every kernel behind the seam runs the same control law: the pure-Go kernel
// agrees with the default to float32 rounding, bfloat16 storage (8-bit mantissa,
// relative rounding 2⁻⁹ per element) to about a percent.
func TestKernelOptions(t *testing.T) {
	rng := rand.New(rand.NewPCG(43, 44))
	r, err := ReconstructorFromMatrix(randomDense(rng, 50, 120), time.Time{})
	if err != nil {
		t.Fatal(err)
	}
	s := randomSlopes(rng, 120)
	run := func(opts mvm.Options) []float32 {
		p, err := NewParams(ParamsConfig{Reconstructor: r, Gain: 0.5, Stroke: 1e3, StrehlWavelength: 1e-6, Kernel: opts})
		if err != nil {
			t.Fatal(err)
		}
		defer p.Close()
		l, _ := NewLoop(p)
		cmd := make([]float32, 50)
		if res := l.Step(s, cmd); !res.OK() {
			t.Fatal(res.Status)
		}
		return cmd
	}
	ref := run(mvm.Options{})
	var norm float64
	for _, v := range ref {
		norm += float64(v) * float64(v)
	}
	norm = math.Sqrt(norm)
	for _, c := range []struct {
		name string
		opts mvm.Options
		tol  float64
	}{
		{"plain", mvm.Options{Kernel: "plain"}, 1e-5},
		{"bfloat16", mvm.Options{Precision: mvm.BFloat16}, 1e-2},
	} {
		t.Run(c.name, func(t *testing.T) {
			got := run(c.opts)
			var d float64
			for i := range got {
				d += math.Pow(float64(got[i]-ref[i]), 2)
			}
			if rel := math.Sqrt(d) / norm; rel > c.tol {
				t.Errorf("%s: command differs from the default kernel by %.3g (relative), want <= %g", c.name, rel, c.tol)
			} else {
				t.Logf("%s: relative difference %.2g", c.name, rel)
			}
		})
	}
}
