package controller

import (
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/mat"
)

func randomDense(rng *rand.Rand, r, c int) *mat.Dense {
	m := mat.NewDense(r, c, nil)
	for i := 0; i < r; i++ {
		for j := 0; j < c; j++ {
			m.Set(i, j, rng.NormFloat64())
		}
	}
	return m
}

// rankDeficient returns a rows×cols matrix of rank k.
func rankDeficient(rng *rand.Rand, rows, cols, k int) *mat.Dense {
	var m mat.Dense
	m.Mul(randomDense(rng, rows, k), randomDense(rng, k, cols))
	return &m
}

// relDiff returns ‖a − b‖_F / ‖b‖_F.
func relDiff(a, b mat.Matrix) float64 {
	var d mat.Dense
	d.Sub(a, b)
	return mat.Norm(&d, 2) / mat.Norm(b, 2)
}

// gonumPinv is the pseudo-inverse assembled directly from gonum's SVD,
// V·S⁺·Uᵀ with singular values below rcond·s_max treated as zero.
func gonumPinv(t *testing.T, m *mat.Dense, rcond float64) *mat.Dense {
	t.Helper()
	var svd mat.SVD
	if !svd.Factorize(m, mat.SVDFull) {
		t.Fatal("gonum SVD failed")
	}
	rows, cols := m.Dims()
	sv := svd.Values(nil)
	var u, v mat.Dense
	svd.UTo(&u)
	svd.VTo(&v)
	sp := mat.NewDense(cols, rows, nil)
	for i, s := range sv {
		if s > rcond*sv[0] {
			sp.Set(i, i, 1/s)
		}
	}
	var vs, out mat.Dense
	vs.Mul(&v, sp)
	out.Mul(&vs, u.T())
	return &out
}

// pinvOf builds a truncated-SVD reconstructor keeping every seen mode, with no
// projection of piston, and returns M⁺ = −Control.
func pinvOf(t *testing.T, m *mat.Dense) *mat.Dense {
	t.Helper()
	r, err := BuildReconstructor(m, ReconstructorConfig{MaxCondition: 1e8, UnseenCondition: 1e8, KeepPiston: true})
	if err != nil {
		t.Fatal(err)
	}
	var p mat.Dense
	p.Scale(-1, r.Control)
	return &p
}

// checkMoorePenrose checks the four Penrose conditions (Penrose, Proc. Cambridge
// Phil. Soc. 51 (1955) 406; docs/control-law.md: M R M = M, R M R = R,
// (M R)ᵀ = M R, (R M)ᵀ = R M) to relative tolerance tol.
func checkMoorePenrose(t *testing.T, m, r mat.Matrix, tol float64) {
	t.Helper()
	var mr, rm, mrm, rmr mat.Dense
	mr.Mul(m, r)
	rm.Mul(r, m)
	mrm.Mul(&mr, m)
	rmr.Mul(&rm, r)
	for _, c := range []struct {
		name string
		a, b mat.Matrix
	}{
		{"M R M = M", &mrm, m},
		{"R M R = R", &rmr, r},
		{"(M R)ᵀ = M R", mr.T(), &mr},
		{"(R M)ᵀ = R M", rm.T(), &rm},
	} {
		if d := relDiff(c.a, c.b); !(d < tol) {
			t.Errorf("Penrose condition %s: relative error %.3g > %g", c.name, d, tol)
		}
	}
}

func TestPseudoInverseRandom(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	cases := []struct {
		name string
		m    *mat.Dense
	}{
		{"tall 60x40", randomDense(rng, 60, 40)},
		{"square 30x30", randomDense(rng, 30, 30)},
		{"wide 20x35", randomDense(rng, 20, 35)},
		{"rank 12 of 50x30", rankDeficient(rng, 50, 30, 12)},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			r := pinvOf(t, c.m)
			checkMoorePenrose(t, c.m, r, 1e-10)
			// Agreement with gonum's SVD pseudo-inverse (gonum mat.SVD).
			if d := relDiff(r, gonumPinv(t, c.m, 1e-8)); d > 1e-10 {
				t.Errorf("differs from gonum SVD pseudo-inverse by %.3g", d)
			}
		})
	}
}

// For full column rank M the pseudo-inverse is (MᵀM)⁻¹Mᵀ (Penrose 1955), computed
// here by gonum's Cholesky, independently of any SVD.
func TestPseudoInverseNormalEquations(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	m := randomDense(rng, 80, 25)
	want := normalSolve(t, m, 0)
	if d := relDiff(pinvOf(t, m), want); d > 1e-10 {
		t.Errorf("truncated SVD with all modes vs (MᵀM)⁻¹Mᵀ: relative error %.3g", d)
	}
}

// normalSolve returns (MᵀM + α²I)⁻¹Mᵀ by Cholesky.
func normalSolve(t *testing.T, m *mat.Dense, alpha float64) *mat.Dense {
	t.Helper()
	_, n := m.Dims()
	var mtm mat.Dense
	mtm.Mul(m.T(), m)
	for i := 0; i < n; i++ {
		mtm.Set(i, i, mtm.At(i, i)+alpha*alpha)
	}
	var ch mat.Cholesky
	if !ch.Factorize(mat.NewSymDense(n, mtm.RawMatrix().Data)) {
		t.Fatal("Cholesky failed")
	}
	var out mat.Dense
	if err := ch.SolveTo(&out, m.T()); err != nil {
		t.Fatal(err)
	}
	return &out
}

// Tikhonov regularised least squares (Tikhonov & Arsenin, Solutions of Ill-Posed
// Problems, 1977): x = (MᵀM + α²I)⁻¹Mᵀ s, checked against gonum's Cholesky solve.
func TestTikhonov(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 6))
	m := randomDense(rng, 70, 30)
	const rel = 0.05
	r, err := BuildReconstructor(m, ReconstructorConfig{Method: MethodTikhonov, Regularization: rel, UnseenCondition: 1e8, KeepPiston: true})
	if err != nil {
		t.Fatal(err)
	}
	want := normalSolve(t, m, rel*r.SingularValues[0])
	var got mat.Dense
	got.Scale(-1, r.Control)
	if d := relDiff(&got, want); d > 1e-10 {
		t.Errorf("Tikhonov vs Cholesky of the normal equations: relative error %.3g", d)
	}
	if r.ModesKept != 30 {
		t.Errorf("modes kept %d, want 30", r.ModesKept)
	}
}

func TestTruncation(t *testing.T) {
	rng := rand.New(rand.NewPCG(7, 8))
	m := randomDense(rng, 60, 30)
	r, err := BuildReconstructor(m, ReconstructorConfig{ModesKept: 10, KeepPiston: true})
	if err != nil {
		t.Fatal(err)
	}
	if r.ModesKept != 10 || len(r.SingularValues) != 30 || r.NumModes() != 10 {
		t.Fatalf("modes kept %d, singular values %d, modes %d", r.ModesKept, len(r.SingularValues), r.NumModes())
	}
	// The truncated pseudo-inverse is the Moore–Penrose inverse of the rank-10
	// approximation M₁₀ = U₁₀S₁₀V₁₀ᵀ (Eckart & Young, Psychometrika 1 (1936) 211).
	var svd mat.SVD
	svd.Factorize(m, mat.SVDThin)
	var u, v mat.Dense
	svd.UTo(&u)
	svd.VTo(&v)
	sv := svd.Values(nil)
	s := mat.NewDiagDense(10, sv[:10])
	var us, m10 mat.Dense
	us.Mul(u.Slice(0, 60, 0, 10), s)
	m10.Mul(&us, v.Slice(0, 30, 0, 10).T())
	var p mat.Dense
	p.Scale(-1, r.Control)
	checkMoorePenrose(t, &m10, &p, 1e-10)

	// Cut by condition number: keep sᵢ >= s_max/cond.
	cond := sv[0] / sv[14] * 1.0001
	r, err = BuildReconstructor(m, ReconstructorConfig{MaxCondition: cond, KeepPiston: true})
	if err != nil {
		t.Fatal(err)
	}
	if r.ModesKept != 15 {
		t.Errorf("max condition %g kept %d modes, want 15", cond, r.ModesKept)
	}
}

// A supplied modal basis B spanning the actuator space gives the same
// reconstruction: B·(M·B)⁺ = M⁺ for invertible B and full column rank M.
func TestModalBasis(t *testing.T) {
	rng := rand.New(rand.NewPCG(9, 10))
	m := randomDense(rng, 50, 20)
	b := randomDense(rng, 20, 20)
	r, err := BuildReconstructor(m, ReconstructorConfig{Basis: b, MaxCondition: 1e8, UnseenCondition: 1e8, KeepPiston: true})
	if err != nil {
		t.Fatal(err)
	}
	var got mat.Dense
	got.Scale(-1, r.Control)
	if d := relDiff(&got, gonumPinv(t, m, 1e-12)); d > 1e-9 {
		t.Errorf("B (M B)⁺ vs M⁺: relative error %.3g", d)
	}
	if r.NumModes() != 20 {
		t.Errorf("modes %d, want 20", r.NumModes())
	}
}

// Modal gains: R = −Modes·G·Inverse. With gains on the singular modes,
// M·R = −U G Uᵀ, so each singular mode of the slopes is fed back with its own gain.
func TestModalGains(t *testing.T) {
	rng := rand.New(rand.NewPCG(11, 12))
	m := randomDense(rng, 40, 12)
	r, err := BuildReconstructor(m, ReconstructorConfig{MaxCondition: 1e8, UnseenCondition: 1e8, KeepPiston: true})
	if err != nil {
		t.Fatal(err)
	}
	gains := make([]float64, 12)
	for i := range gains {
		gains[i] = 0.1 * float64(i)
	}
	c, err := r.ControlMatrix(gains)
	if err != nil {
		t.Fatal(err)
	}
	var svd mat.SVD
	svd.Factorize(m, mat.SVDThin)
	var u mat.Dense
	svd.UTo(&u)
	var ug, want, got mat.Dense
	ug.Mul(&u, mat.NewDiagDense(12, gains))
	want.Mul(&ug, u.T())
	want.Scale(-1, &want)
	got.Mul(m, c)
	if d := relDiff(&got, &want); d > 1e-10 {
		t.Errorf("M·R vs −U·G·Uᵀ: relative error %.3g", d)
	}
}

// Piston and unseen modes are projected out: commands have zero mean and no
// component on an actuator the sensor cannot see.
func TestUnseenProjection(t *testing.T) {
	rng := rand.New(rand.NewPCG(13, 14))
	m := randomDense(rng, 40, 15)
	for i := 0; i < 40; i++ {
		m.Set(i, 14, 0) // actuator 14 is outside the sensor's view
	}
	r, err := BuildReconstructor(m, ReconstructorConfig{})
	if err != nil {
		t.Fatal(err)
	}
	if r.Unseen != 2 {
		t.Errorf("unseen dimension %d, want 2 (actuator 14 and piston)", r.Unseen)
	}
	s := mat.NewVecDense(40, nil)
	for i := 0; i < 40; i++ {
		s.SetVec(i, rng.NormFloat64())
	}
	var c mat.VecDense
	c.MulVec(r.Control, s)
	mean := mat.Sum(&c) / 15
	if math.Abs(mean) > 1e-12*mat.Norm(&c, 2) {
		t.Errorf("command mean %g: piston not projected out", mean)
	}
	if math.Abs(c.AtVec(14)) > 1e-12*mat.Norm(&c, 2) {
		t.Errorf("unseen actuator 14 commanded %g", c.AtVec(14))
	}
}

func TestBuildReconstructorRejects(t *testing.T) {
	rng := rand.New(rand.NewPCG(15, 16))
	m := randomDense(rng, 20, 10)
	nan := mat.DenseCopyOf(m)
	nan.Set(3, 4, math.NaN())
	cases := []struct {
		name string
		m    *mat.Dense
		c    ReconstructorConfig
	}{
		{"nil matrix", nil, ReconstructorConfig{}},
		{"NaN entry", nan, ReconstructorConfig{}},
		{"zero matrix", mat.NewDense(4, 3, nil), ReconstructorConfig{}},
		{"method", m, ReconstructorConfig{Method: MethodMatrix}},
		{"modes kept negative", m, ReconstructorConfig{ModesKept: -1}},
		{"modes kept too many", m, ReconstructorConfig{ModesKept: 11}},
		{"max condition below 1", m, ReconstructorConfig{MaxCondition: 0.5}},
		{"unseen condition NaN", m, ReconstructorConfig{UnseenCondition: math.NaN()}},
		{"tikhonov without alpha", m, ReconstructorConfig{Method: MethodTikhonov}},
		{"tikhonov with modes kept", m, ReconstructorConfig{Method: MethodTikhonov, Regularization: 0.1, ModesKept: 3}},
		{"basis rows", m, ReconstructorConfig{Basis: mat.NewDense(9, 3, nil)}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			if _, err := BuildReconstructor(c.m, c.c); err == nil {
				t.Error("accepted")
			} else {
				t.Log(err)
			}
		})
	}
}

// The truncation rules on a matrix of known spectrum M = U·diag(s)·Vᵀ.
func TestTruncationRules(t *testing.T) {
	rng := rand.New(rand.NewPCG(17, 18))
	s := []float64{100, 50, 10, 4, 3, 2, 1, 0.05} // conditions 1 … 50, 100, 2000
	var qu, qv mat.QR
	qu.Factorize(randomDense(rng, 20, 8))
	qv.Factorize(randomDense(rng, 8, 8))
	var u, v, us, m mat.Dense
	qu.QTo(&u)
	qv.QTo(&v)
	us.Mul(u.Slice(0, 20, 0, 8), mat.NewDiagDense(8, s))
	m.Mul(&us, v.T())
	cases := []struct {
		name         string
		c            ReconstructorConfig
		kept, unseen int
	}{
		{"defaults", ReconstructorConfig{}, 4, 1},
		{"modes kept", ReconstructorConfig{ModesKept: 7}, 7, 1},
		{"max condition", ReconstructorConfig{MaxCondition: 60}, 6, 1},
		{"unseen condition below the default cut", ReconstructorConfig{UnseenCondition: 20}, 3, 5},
		{"tikhonov uses every seen mode", ReconstructorConfig{Method: MethodTikhonov, Regularization: 0.01}, 7, 1},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			c.c.KeepPiston = true
			r, err := BuildReconstructor(&m, c.c)
			if err != nil {
				t.Fatal(err)
			}
			if r.ModesKept != c.kept || r.Unseen != c.unseen {
				t.Errorf("kept %d, unseen %d; want %d and %d", r.ModesKept, r.Unseen, c.kept, c.unseen)
			}
		})
	}
	if _, err := BuildReconstructor(&m, ReconstructorConfig{ModesKept: 8}); err == nil {
		t.Error("keeping the unseen eighth mode accepted")
	}
}
