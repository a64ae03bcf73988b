package dm

import (
	"fmt"
	"math"
	"math/rand/v2"
	"testing"

	"stillsky/sim/optics"
)

func pupil(t testing.TB, samples int) *optics.Pupil {
	t.Helper()
	p, err := optics.NewPupil(optics.PupilConfig{Diameter: 3.6, Obstruction: 0.15, N: samples})
	if err != nil {
		t.Fatal(err)
	}
	return p
}

// index returns the command index of the actuator at grid position (ix, iy)
// relative to the mirror centre, or -1.
func index(m *Mirror, ix, iy int) int {
	for k, q := range m.Positions() {
		if math.Abs(q[0]-float64(ix)*m.Pitch()) < 1e-9 && math.Abs(q[1]-float64(iy)*m.Pitch()) < 1e-9 {
			return k
		}
	}
	return -1
}

// TestNeighbourCoupling pokes one actuator and reads the surface at its
// neighbour: the configured coupling is 10–15 % typical (common practice).
// Sample centres fall half a sample from the actuators, so the value at a point
// is taken as the geometric mean of the 2×2 samples around it. For a Gaussian,
// ln f is quadratic, so that mean is off by the same factor at the actuator
// and at the neighbour and the ratio is exact.
func TestNeighbourCoupling(t *testing.T) {
	for _, c := range []struct {
		coupling float64
		samples  int
	}{{0.10, 96}, {0.15, 96}, {0.15, 192}, {0.30, 48}} {
		t.Run(fmt.Sprintf("coupling %g, %d samples", c.coupling, c.samples), func(t *testing.T) {
			p := pupil(t, c.samples)
			m, err := New(p, Config{Actuators: 25, Coupling: c.coupling, Stroke: 3e-6, Margin: 0.75})
			if err != nil {
				t.Fatal(err)
			}
			// Poke the actuator 3 pitches right of centre: well inside the pupil,
			// away from the obstruction.
			k := index(m, 3, 0)
			if k < 0 {
				t.Fatal("actuator (3, 0) not valid")
			}
			cmd := make([]float32, m.NumValid())
			cmd[k] = 1e-6
			surface := make([]float64, p.N*p.N)
			m.Surface(cmd, surface)
			at := func(x, y float64) float64 {
				// Samples with centres at x ± scale/2, y ± scale/2.
				ix := int(math.Round((x+p.Diameter/2)/p.Scale)) - 1
				iy := int(math.Round((y+p.Diameter/2)/p.Scale)) - 1
				prod := 1.0
				for dy := 0; dy < 2; dy++ {
					for dx := 0; dx < 2; dx++ {
						prod *= surface[(iy+dy)*p.N+ix+dx]
					}
				}
				return math.Pow(prod, 0.25)
			}
			pos := m.Positions()[k]
			centre := at(pos[0], pos[1])
			for _, d := range [][2]float64{{1, 0}, {-1, 0}, {0, 1}, {0, -1}} {
				got := at(pos[0]+d[0]*m.Pitch(), pos[1]+d[1]*m.Pitch()) / centre
				if math.Abs(got-c.coupling) > 1e-9 {
					t.Errorf("coupling %g, %d samples: neighbour %v reads %.6f", c.coupling, c.samples, d, got)
				}
			}
			// Diagonal neighbour of a separable Gaussian: c² (derived).
			if got := at(pos[0]+m.Pitch(), pos[1]+m.Pitch()) / centre; math.Abs(got-c.coupling*c.coupling) > 1e-9 {
				t.Errorf("coupling %g: diagonal reads %.6f, want %.6f", c.coupling, got, c.coupling*c.coupling)
			}
		})
	}
}

func TestClipping(t *testing.T) {
	p := pupil(t, 96)
	m, err := New(p, Config{Actuators: 25, Coupling: 0.15, Stroke: 2e-6, Margin: 0.75})
	if err != nil {
		t.Fatal(err)
	}
	k := index(m, 2, 2)
	cases := []struct {
		cmd, want float64
	}{
		{1e-6, 1e-6}, {2e-6, 2e-6}, {5e-6, 2e-6}, {-9e-6, -2e-6}, {math.NaN(), 0}, {math.Inf(1), 2e-6},
	}
	surface := make([]float64, p.N*p.N)
	ref := make([]float64, p.N*p.N)
	cmd := make([]float32, m.NumValid())
	cmd[k] = 1
	unit := make([]float64, p.N*p.N)
	cfgUnit := m.cfg
	cfgUnit.Stroke = 10
	mu, _ := New(p, cfgUnit)
	mu.Surface(cmd, unit)
	for _, c := range cases {
		t.Run(fmt.Sprintf("command %g", c.cmd), func(t *testing.T) {
			cmd[k] = float32(c.cmd)
			m.Surface(cmd, surface)
			for i := range ref {
				ref[i] = c.want * unit[i]
			}
			for i := range surface {
				if math.Abs(surface[i]-ref[i]) > 1e-6*math.Abs(c.want)+1e-18 {
					t.Fatalf("cmd %g: surface[%d] = %g, want %g (clipped to %g)", c.cmd, i, surface[i], ref[i], c.want)
				}
			}
		})
	}
	if n := m.Saturated([]float32{0, 1e-6, 3e-6, -3e-6, float32(math.NaN())}); n != 3 {
		t.Errorf("Saturated = %d, want 3", n)
	}
}

func TestValidCount(t *testing.T) {
	// Gauss circle problem: lattice points with i²+j² <= r² (OEIS A000328):
	// r = 4 → 49, r = 12 → 441, r = 20 → 1257.
	for _, c := range []struct {
		actuators int
		want      int
	}{{9, 49}, {25, 441}, {41, 1257}} {
		t.Run(fmt.Sprintf("%d actuators", c.actuators), func(t *testing.T) {
			p := pupil(t, 4*(c.actuators-1))
			m, err := New(p, Config{Actuators: c.actuators, Coupling: 0.15, Stroke: 3e-6, Margin: 0})
			if err != nil {
				t.Fatal(err)
			}
			if m.NumValid() != c.want {
				t.Errorf("%d×%d, margin 0: %d valid, want %d", c.actuators, c.actuators, m.NumValid(), c.want)
			}
			// A margin keeps more, never more than the whole grid.
			wide, err := New(p, Config{Actuators: c.actuators, Coupling: 0.15, Stroke: 3e-6, Margin: 0.75})
			if err != nil {
				t.Fatal(err)
			}
			if wide.NumValid() <= m.NumValid() || wide.NumValid() > c.actuators*c.actuators {
				t.Errorf("%d×%d, margin 0.75: %d valid", c.actuators, c.actuators, wide.NumValid())
			}
		})
	}
}

func TestTruncation(t *testing.T) {
	p := pupil(t, 96)
	m, err := New(p, Config{Actuators: 25, Coupling: 0.15, Stroke: 3e-6, Margin: 0.75})
	if err != nil {
		t.Fatal(err)
	}
	for i, w := range m.band {
		if w != 0 && (w < Cutoff || w > 1) {
			t.Fatalf("band entry %d stores weight %g outside [Cutoff, 1]", i, w)
		}
	}
}

func TestSurfaceAllocatesNothing(t *testing.T) {
	p := pupil(t, 96)
	m, err := New(p, Config{Actuators: 25, Coupling: 0.15, Stroke: 3e-6, Margin: 0.75})
	if err != nil {
		t.Fatal(err)
	}
	cmd := make([]float32, m.NumValid())
	for i := range cmd {
		cmd[i] = 1e-7
	}
	surface := make([]float64, p.N*p.N)
	if a := testing.AllocsPerRun(10, func() { m.Surface(cmd, surface) }); a != 0 {
		t.Errorf("Surface allocates %v times per call", a)
	}
}

func TestNewRefuses(t *testing.T) {
	p := pupil(t, 96)
	for _, c := range []Config{
		{Actuators: 1, Coupling: 0.15, Stroke: 1e-6},
		{Actuators: 25, Coupling: 0, Stroke: 1e-6},
		{Actuators: 25, Coupling: 1, Stroke: 1e-6},
		{Actuators: 25, Coupling: 0.15, Stroke: 0},
		{Actuators: 25, Coupling: 0.15, Stroke: 1e-6, Margin: -1},
	} {
		if _, err := New(p, c); err == nil {
			t.Errorf("%+v accepted", c)
		}
	}
}

func BenchmarkSurface(b *testing.B) {
	for _, n := range []int{25, 65} {
		p, err := optics.NewPupil(optics.PupilConfig{Diameter: 8, Obstruction: 0.14, N: 4 * (n - 1)})
		if err != nil {
			b.Fatal(err)
		}
		m, err := New(p, Config{Actuators: n, Coupling: 0.15, Stroke: 3e-6, Margin: 0.75})
		if err != nil {
			b.Fatal(err)
		}
		cmd := make([]float32, m.NumValid())
		for i := range cmd {
			cmd[i] = 1e-7
		}
		surface := make([]float64, p.N*p.N)
		b.Run(fmt.Sprintf("%dx%d", n, n), func(b *testing.B) {
			for b.Loop() {
				m.Surface(cmd, surface)
			}
		})
	}
}

// TestInfluenceSuperposes checks that Surface is the superposition of the
// actuators' influence functions weighted by the clipped command (a mirror of
// independent actuators is linear in its command, the premise of every
// interaction matrix; common practice), to float64 rounding.
func TestInfluenceSuperposes(t *testing.T) {
	p := pupil(t, 96)
	m, err := New(p, Config{Actuators: 25, Coupling: 0.15, Stroke: 3e-6, Margin: 0.75})
	if err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(1, 2))
	cmd := make([]float32, m.NumValid())
	for i := range cmd {
		cmd[i] = float32(4e-6 * (rng.Float64() - 0.5)) // some beyond the ±3 µm stroke
	}
	want := make([]float64, p.N*p.N)
	m.Surface(cmd, want)
	got := make([]float64, len(want))
	infl := make([]float64, len(want))
	peak := 0.0
	for k, c := range cmd {
		m.Influence(k, infl)
		for i, v := range infl {
			got[i] += m.Clip(c) * v
		}
	}
	for _, v := range want {
		peak = max(peak, math.Abs(v))
	}
	for i := range want {
		if d := math.Abs(got[i] - want[i]); d > 1e-12*peak {
			t.Fatalf("sample %d: superposed %g, Surface %g", i, got[i], want[i])
		}
	}
	if a := testing.AllocsPerRun(10, func() { m.Influence(3, infl) }); a != 0 {
		t.Errorf("Influence allocates %v times per call", a)
	}
}
