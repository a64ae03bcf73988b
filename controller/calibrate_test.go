package controller

import (
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// linearBench is a noiseless linear sensor s = M·c with the command applied delay
// frames late, the model the calibrator's settle count is designed for.
type linearBench struct {
	m       *mat.Dense
	pending [][]float32 // commands not yet seen by the sensor, oldest first
	seen    []float32
}

func newLinearBench(m *mat.Dense, delay int) *linearBench {
	_, na := m.Dims()
	b := &linearBench{m: m, seen: make([]float32, na)}
	for i := 0; i < delay; i++ {
		b.pending = append(b.pending, make([]float32, na))
	}
	return b
}

func (b *linearBench) frame(cmd []float32) []float32 {
	b.pending = append(b.pending, append([]float32(nil), cmd...))
	b.seen, b.pending = b.pending[0], b.pending[1:]
	ns, na := b.m.Dims()
	out := make([]float32, ns)
	for i := 0; i < ns; i++ {
		var s float64
		for j := 0; j < na; j++ {
			s += b.m.At(i, j) * float64(b.seen[j])
		}
		out[i] = float32(s)
	}
	return out
}

func calibrate(t *testing.T, m *mat.Dense, c CalibrationConfig, delay int) *mat.Dense {
	t.Helper()
	cal, err := NewCalibrator(c)
	if err != nil {
		t.Fatal(err)
	}
	bench := newLinearBench(m, delay)
	cmd := make([]float32, c.Actuators)
	for !cal.Done() {
		if err := cal.Command(cmd); err != nil {
			t.Fatal(err)
		}
		if err := cal.Feed(bench.frame(cmd)); err != nil {
			t.Fatal(err)
		}
	}
	if done, total := cal.Progress(); done != total {
		t.Fatalf("progress %d/%d when done", done, total)
	}
	got, err := cal.InteractionMatrix()
	if err != nil {
		t.Fatal(err)
	}
	return got
}

// On a noiseless linear model, push–pull pokes and Hadamard patterns decoded with
// H Hᵀ = nI (Sylvester, Phil. Mag. 34 (1867) 461; Hadamard, Bull. Sci. Math. 17
// (1893) 240) both recover M exactly, up to float32 rounding of the slopes.
func TestCalibrationRecoversMatrix(t *testing.T) {
	rng := rand.New(rand.NewPCG(21, 22))
	const ns, na = 46, 21 // 21 actuators: Hadamard order 32, 11 unused rows
	m := randomDense(rng, ns, na)
	m.Scale(1e5, m) // radians per metre of surface, a realistic magnitude
	for _, delay := range []int{0, 1, 2} {
		for _, had := range []bool{false, true} {
			c := CalibrationConfig{Actuators: na, Slopes: ns, Amplitude: 50e-9, FramesPerPattern: 3, SettleFrames: delay, Hadamard: had}
			got := calibrate(t, m, c, delay)
			if d := relDiff(got, m); d > 1e-6 {
				t.Errorf("delay %d hadamard %v: relative error %.3g", delay, had, d)
			}
		}
	}
	pokes := calibrate(t, m, CalibrationConfig{Actuators: na, Slopes: ns, Amplitude: 50e-9, FramesPerPattern: 1}, 0)
	had := calibrate(t, m, CalibrationConfig{Actuators: na, Slopes: ns, Amplitude: 50e-9, FramesPerPattern: 1, Hadamard: true}, 0)
	if d := relDiff(had, pokes); d > 1e-6 {
		t.Errorf("Hadamard vs single pokes: relative error %.3g", d)
	}
	// Too few settle frames for the delay: frames of the previous pattern leak in.
	short := calibrate(t, m, CalibrationConfig{Actuators: na, Slopes: ns, Amplitude: 50e-9, FramesPerPattern: 2, SettleFrames: 1}, 2)
	if d := relDiff(short, m); d < 0.1 {
		t.Errorf("settle 1 with delay 2 gave relative error %.3g: the settle count has no effect", d)
	}
}

func TestCalibratorProtocol(t *testing.T) {
	cal, err := NewCalibrator(CalibrationConfig{Actuators: 3, Slopes: 4, Amplitude: 1e-7, FramesPerPattern: 2, SettleFrames: 1})
	if err != nil {
		t.Fatal(err)
	}
	if _, total := cal.Progress(); total != 3*2*(1+2) {
		t.Errorf("total frames %d, want 18", total)
	}
	if _, err := cal.InteractionMatrix(); err == nil {
		t.Error("interaction matrix before done accepted")
	}
	if err := cal.Command(make([]float32, 2)); err == nil {
		t.Error("command of length 2 accepted")
	}
	for _, bad := range [][]float32{make([]float32, 5), {0, float32(math.NaN()), 0, 0}, {0, 0, float32(math.Inf(-1)), 0}} {
		if err := cal.Feed(bad); err == nil {
			t.Errorf("frame %v accepted", bad)
		}
	}
	if done, _ := cal.Progress(); done != 0 {
		t.Errorf("rejected frames counted: progress %d", done)
	}
	cmd := make([]float32, 3)
	want := [][]float32{{1e-7, 0, 0}, {1e-7, 0, 0}, {1e-7, 0, 0}, {-1e-7, 0, 0}, {-1e-7, 0, 0}, {-1e-7, 0, 0}, {0, 1e-7, 0}}
	for k, w := range want {
		cal.Command(cmd)
		for i := range w {
			if cmd[i] != w[i] {
				t.Fatalf("frame %d: command %v, want %v", k, cmd, w)
			}
		}
		if err := cal.Feed(make([]float32, 4)); err != nil {
			t.Fatal(err)
		}
	}
	for !cal.Done() {
		cal.Feed(make([]float32, 4))
	}
	cal.Command(cmd)
	if cmd[0] != 0 || cmd[1] != 0 || cmd[2] != 0 {
		t.Errorf("command after done %v, want flat", cmd)
	}
	if err := cal.Feed(make([]float32, 4)); err == nil {
		t.Error("feed after done accepted")
	}
}

func TestNewCalibratorRejects(t *testing.T) {
	ok := CalibrationConfig{Actuators: 3, Slopes: 4, Amplitude: 1e-7, FramesPerPattern: 1}
	cases := []struct {
		name string
		edit func(*CalibrationConfig)
	}{
		{"actuators", func(c *CalibrationConfig) { c.Actuators = 0 }},
		{"slopes", func(c *CalibrationConfig) { c.Slopes = -1 }},
		{"amplitude zero", func(c *CalibrationConfig) { c.Amplitude = 0 }},
		{"amplitude NaN", func(c *CalibrationConfig) { c.Amplitude = math.NaN() }},
		{"amplitude Inf", func(c *CalibrationConfig) { c.Amplitude = math.Inf(1) }},
		{"frames", func(c *CalibrationConfig) { c.FramesPerPattern = 0 }},
		{"settle", func(c *CalibrationConfig) { c.SettleFrames = -1 }},
		{"actuators huge", func(c *CalibrationConfig) { c.Actuators = 1 << 40 }},
		{"slopes × patterns huge", func(c *CalibrationConfig) { c.Actuators, c.Slopes = 1<<20, 1<<20 }},
		{"frames huge", func(c *CalibrationConfig) { c.FramesPerPattern = 1 << 50 }},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			cfg := ok
			c.edit(&cfg)
			if _, err := NewCalibrator(cfg); err == nil {
				t.Error("accepted")
			} else {
				t.Log(err)
			}
		})
	}
}

// The fast Walsh–Hadamard transform equals the product with the Sylvester
// matrix Hᵢⱼ = (−1)^popcount(i&j) (gonum's dense product as reference).
func TestWalshHadamardIsTheProduct(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 6))
	for _, n := range []int{1, 2, 8, 64} {
		x := make([]float64, n)
		for i := range x {
			x[i] = rng.NormFloat64()
		}
		h := mat.NewDense(n, n, nil)
		for i := range n {
			for j := range n {
				h.Set(i, j, hadamard(i, j))
			}
		}
		var want mat.VecDense
		want.MulVec(h, mat.NewVecDense(n, append([]float64(nil), x...)))
		walshHadamard(x)
		for i := range x {
			if math.Abs(x[i]-want.AtVec(i)) > 1e-12*float64(n) {
				t.Fatalf("n %d: element %d = %g, product %g", n, i, x[i], want.AtVec(i))
			}
		}
	}
}
