package controller

import (
	"math"
	"math/rand/v2"
	"strings"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// gridMirror returns the actuators of an n×n grid of the given pitch inside a
// circle of radius (n−1)/2 + 0.5 pitches, centred on the origin.
func gridMirror(n int, pitch float64) [][2]float64 {
	var pos [][2]float64
	r := (float64(n-1)/2 + 0.5) * pitch
	for iy := range n {
		for ix := range n {
			x, y := (float64(ix)-float64(n-1)/2)*pitch, (float64(iy)-float64(n-1)/2)*pitch
			if math.Hypot(x, y) <= r {
				pos = append(pos, [2]float64{x, y})
			}
		}
	}
	return pos
}

// TestMirrorMetricGaussianIntegral checks MirrorMetric between actuators far
// from the mirror's edge against the integral of the product of two Gaussians
// over the plane, ∫exp(−a|x−p|²)·exp(−a|x−q|²)dA = π/(2a)·exp(−a|p−q|²/2)
// (the Gaussian integral; any table of integrals, e.g. Gradshteyn & Ryzhik
// 3.323), divided by the mirror's area as the metric's mean is taken over the
// samples (4 per pitch, so the area is the sample count × (pitch/4)²).
func TestMirrorMetricGaussianIntegral(t *testing.T) {
	const pitch, coupling = 0.5, 0.15
	pos := gridMirror(17, pitch)
	g, err := MirrorMetric(pos, pitch, coupling)
	if err != nil {
		t.Fatal(err)
	}
	n, k := g.SymBand()
	if n != len(pos) || k < 1 || k >= n {
		t.Fatalf("metric %d×%d with bandwidth %d, want %d actuators and a band", n, n, k, len(pos))
	}
	r := 0.0 // the mirror's radius: half a pitch beyond the outermost actuator
	for _, p := range pos {
		r = max(r, math.Hypot(p[0], p[1]))
	}
	r += pitch / 2
	xs, _ := KLPupilSamples(2*r, pitch, 4)
	area := float64(len(xs)) * (pitch / 4) * (pitch / 4)
	a := -math.Log(coupling) / (pitch * pitch)
	centre := -1
	for i, p := range pos {
		if p == [2]float64{0, 0} {
			centre = i
		}
	}
	for _, tc := range []struct {
		name   string
		dx, dy float64
	}{{"self", 0, 0}, {"neighbour", 1, 0}, {"diagonal", 1, 1}, {"two pitches", 0, 2}, {"knight", 2, 1}} {
		t.Run(tc.name, func(t *testing.T) {
			j := -1
			for i, p := range pos {
				if math.Abs(p[0]-tc.dx*pitch) < 1e-9 && math.Abs(p[1]-tc.dy*pitch) < 1e-9 {
					j = i
				}
			}
			d2 := (tc.dx*tc.dx + tc.dy*tc.dy) * pitch * pitch
			want := math.Pi / (2 * a) * math.Exp(-a*d2/2) / area
			if got := g.At(centre, j); math.Abs(got-want) > 1e-6*want {
				t.Errorf("G(centre, %v) = %.9g, want %.9g (relative error %.2g)", tc.name, got, want, got/want-1)
			}
		})
	}
}

// TestMirrorModesAgainstGonum builds mirror modes for a random interaction
// matrix and checks them against gonum: the metric's
// dense Cholesky factor and gonum's symmetric eigensolver give the same
// generalised eigenvalues (Golub & Van Loan, Matrix Computations, 4th ed.,
// §8.7, the symmetric-definite problem reduced by Cholesky), the modes are
// orthonormal in the metric and their slopes orthogonal; and, for a matrix
// blind to piston only, with equal gains and every seen mode kept the
// reconstructor equals the zonal one, −P·M⁺ from gonum's SVD with piston P
// projected out.
func TestMirrorModesAgainstGonum(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 6))
	pos := gridMirror(14, 1) // 156 actuators: three row blocks of bandSolve
	na := len(pos)
	ns := 2 * na
	g, err := MirrorMetric(pos, 1, 0.2)
	if err != nil {
		t.Fatal(err)
	}
	// M = A·(I − 11ᵀ/n): every direction but piston seen.
	a := randomDense(rng, ns, na)
	m := mat.NewDense(ns, na, nil)
	for i := range ns {
		mean := 0.0
		for j := range na {
			mean += a.At(i, j) / float64(na)
		}
		for j := range na {
			m.Set(i, j, a.At(i, j)-mean)
		}
	}
	// First A itself, which sees every direction: no mode is cut, so none is
	// projected and the modes are exactly the generalised eigenvectors.
	cfg := ReconstructorConfig{Metric: g, MaxCondition: 1e3}
	r, err := BuildReconstructor(a, cfg)
	if err != nil {
		t.Fatal(err)
	}
	if r.Basis != MirrorBasisName || r.ModesKept != na || r.NumModes() != na || r.Unseen != 0 {
		t.Fatalf("basis %q, %d modes kept, %d modes, %d unseen: want %q, %d, %d and 0", r.Basis, r.ModesKept, r.NumModes(), r.Unseen, MirrorBasisName, na, na)
	}

	dense := mat.NewSymDense(na, nil)
	for i := range na {
		for j := i; j < na; j++ {
			dense.SetSym(i, j, g.At(i, j))
		}
	}
	var chol mat.Cholesky
	if !chol.Factorize(dense) {
		t.Fatal("gonum: metric not positive definite")
	}
	var l mat.TriDense
	chol.LTo(&l)
	var nrm, x, c mat.Dense
	nrm.Mul(a.T(), a)
	if err := x.Solve(&l, &nrm); err != nil {
		t.Fatal(err)
	}
	if err := c.Solve(&l, x.T()); err != nil {
		t.Fatal(err)
	}
	var eig mat.EigenSym
	if !eig.Factorize(symmetric(&c), false) {
		t.Fatal("gonum EigenSym failed")
	}
	ref := eig.Values(nil) // ascending
	for i, s := range r.SingularValues {
		want := ref[na-1-i]
		if math.Abs(s*s-want) > 1e-9*ref[na-1] {
			t.Errorf("mode %d: λ = %.12g, gonum %.12g", i, s*s, want)
		}
	}

	var gb, btgb, mb, slopes mat.Dense
	gb.Mul(dense, r.Modes)
	btgb.Mul(r.Modes.T(), &gb)
	mb.Mul(a, r.Modes)
	slopes.Mul(mb.T(), &mb)
	for i := range na {
		for j := range na {
			want := 0.0
			if i == j {
				want = 1
			}
			if d := btgb.At(i, j) - want; math.Abs(d) > 1e-9 {
				t.Fatalf("bᵢᵀGbⱼ (%d, %d) = %g, want %g", i, j, btgb.At(i, j), want)
			}
			want *= r.SingularValues[i] * r.SingularValues[i]
			if d := slopes.At(i, j) - want; math.Abs(d) > 1e-9*slopes.At(0, 0) {
				t.Fatalf("(M·bᵢ)ᵀ(M·bⱼ) (%d, %d) = %g, want %g", i, j, slopes.At(i, j), want)
			}
		}
	}

	// Then M = A·P, blind to piston: the piston mode is cut and projected out.
	r, err = BuildReconstructor(m, cfg)
	if err != nil {
		t.Fatal(err)
	}
	if r.ModesKept != na-1 || r.Unseen != 1 {
		t.Fatalf("%d modes kept, %d unseen: want %d (all but piston) and 1", r.ModesKept, r.Unseen, na-1)
	}
	pinv := gonumPinv(t, m, 1e-10)
	want := mat.NewDense(na, ns, nil)
	for j := range ns {
		mean := 0.0
		for i := range na {
			mean += pinv.At(i, j) / float64(na)
		}
		for i := range na {
			want.Set(i, j, -(pinv.At(i, j) - mean))
		}
	}
	if d := relDiff(r.Control, want); d > 1e-10 {
		t.Errorf("mirror-mode control matrix differs from −P·M⁺ by %.3g (relative), want <= 1e-10", d)
	}
	ones := make([]float64, na-1)
	for i := range ones {
		ones[i] = 1
	}
	cm, err := r.ControlMatrix(ones)
	if err != nil {
		t.Fatal(err)
	}
	if d := relDiff(cm, want); d > 1e-10 {
		t.Errorf("ControlMatrix(ones) differs from −P·M⁺ by %.3g", d)
	}
}

// TestMirrorModesRejects checks the configurations BuildReconstructor refuses
// with a metric.
func TestMirrorModesRejects(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 1))
	pos := gridMirror(5, 1)
	g, err := MirrorMetric(pos, 1, 0.2)
	if err != nil {
		t.Fatal(err)
	}
	na := len(pos)
	m := randomDense(rng, 2*na, na)
	small, _ := MirrorMetric(gridMirror(4, 1), 1, 0.2)
	for _, tc := range []struct {
		name string
		c    ReconstructorConfig
		want string
	}{
		{"tikhonov", ReconstructorConfig{Metric: g, Method: MethodTikhonov, Regularization: 0.1}, "only svd"},
		{"basis too", ReconstructorConfig{Metric: g, Basis: mat.NewDense(na, 2, nil)}, "give one"},
		{"other name", ReconstructorConfig{Metric: g, BasisName: "kl"}, "want \"mirror\""},
		{"svd solver", ReconstructorConfig{Metric: g, Solver: SolverSVD}, "normal-matrix route"},
		{"condition", ReconstructorConfig{Metric: g, UnseenCondition: 1e6}, "at most 100000"},
		{"size", ReconstructorConfig{Metric: small}, "want"},
		{"too many modes", ReconstructorConfig{Metric: g, ModesKept: na + 1}, "modes kept"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			_, err := BuildReconstructor(m, tc.c)
			if err == nil || !strings.Contains(err.Error(), tc.want) {
				t.Errorf("error %v, want one containing %q", err, tc.want)
			}
		})
	}
	for _, tc := range []struct {
		name     string
		pos      [][2]float64
		pitch, c float64
		want     string
	}{
		{"one actuator", pos[:1], 1, 0.2, "want >= 2"},
		{"pitch", pos, 0, 0.2, "pitch 0"},
		{"coupling", pos, 1, 1, "coupling 1"},
		{"NaN position", append([][2]float64{{math.NaN(), 0}}, pos...), 1, 0.2, "must be finite"},
	} {
		t.Run("metric "+tc.name, func(t *testing.T) {
			_, err := MirrorMetric(tc.pos, tc.pitch, tc.c)
			if err == nil || !strings.Contains(err.Error(), tc.want) {
				t.Errorf("error %v, want one containing %q", err, tc.want)
			}
		})
	}
}

// TestMirrorModalGainsReachTheLoop feeds Loop.Step the slopes of one mirror
// mode, s = M·bⱼ, from a flat mirror: the first command is −g·gⱼ·bⱼ, so a zero modal gain leaves that mode alone and the others'
// gains do not touch it (the slopes of mirror modes are orthogonal).
func TestMirrorModalGainsReachTheLoop(t *testing.T) {
	rng := rand.New(rand.NewPCG(7, 8))
	pos := gridMirror(7, 1)
	na := len(pos)
	ns := 2 * na
	g, err := MirrorMetric(pos, 1, 0.15)
	if err != nil {
		t.Fatal(err)
	}
	// A random M sees every direction, piston too: no mode is cut.
	m := randomDense(rng, ns, na)
	r, err := BuildReconstructor(m, ReconstructorConfig{Metric: g, MaxCondition: 1e3})
	if err != nil {
		t.Fatal(err)
	}
	nm := r.NumModes()
	const gain, scale = 0.4, 1e-8
	for _, j := range []int{0, nm / 2, nm - 1} {
		var s mat.VecDense
		s.MulVec(m, r.Modes.ColView(j))
		slopes := make([]float32, ns)
		for i := range slopes {
			slopes[i] = float32(scale * s.AtVec(i))
		}
		for _, gj := range []float64{0, 0.5, 1} {
			gains := make([]float64, nm)
			for i := range gains {
				gains[i] = 2 // the others' gains must not matter
			}
			gains[j] = gj
			p, err := NewParams(ParamsConfig{Reconstructor: r, Gain: gain, ModalGains: gains, Stroke: 1e-5, StrehlWavelength: 1e-6})
			if err != nil {
				t.Fatal(err)
			}
			loop, err := NewLoop(p)
			if err != nil {
				t.Fatal(err)
			}
			cmd := make([]float32, na)
			loop.Step(slopes, cmd)
			worst, peak := 0.0, 0.0
			for i := range na {
				want := -gain * gj * scale * r.Modes.At(i, j)
				worst = max(worst, math.Abs(float64(cmd[i])-want))
				peak = max(peak, math.Abs(gain*scale*r.Modes.At(i, j)))
			}
			if worst > 1e-4*peak {
				t.Errorf("mode %d, modal gain %g: command off −g·gⱼ·bⱼ by %.3g (peak %.3g)", j, gj, worst, peak)
			}
			p.Close()
		}
	}
}
