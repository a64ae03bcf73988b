package controller

import (
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// klMirror is a 10 × 10 Fried-geometry mirror over a 1 m pupil (outer rows on
// the edge, coupling 0.15), keeping the actuators within half a pitch of it.
func klMirror() KLConfig {
	const across, d = 10, 1.0
	pitch := d / (across - 1)
	var pos [][2]float64
	for iy := range across {
		for ix := range across {
			x, y := -d/2+float64(ix)*pitch, -d/2+float64(iy)*pitch
			if math.Hypot(x, y) <= d/2+0.5*pitch {
				pos = append(pos, [2]float64{x, y})
			}
		}
	}
	return KLConfig{Positions: pos, Pitch: pitch, Coupling: 0.15, Diameter: d}
}

// TestKLBasisOrthonormalAndOrdered checks that the KL modes' surfaces are
// orthonormal over the pupil (mean of mᵢ·mⱼ = δᵢⱼ) and that their variances
// decrease.
func TestKLBasisOrthonormalAndOrdered(t *testing.T) {
	c := klMirror()
	b, v, err := KLBasis(c)
	if err != nil {
		t.Fatal(err)
	}
	xs, ys := KLPupilSamples(c.Diameter, c.Pitch, 3)
	var s, gram mat.Dense
	s.Mul(KLInfluence(c, xs, ys), b)
	gram.Mul(s.T(), &s)
	gram.Scale(1/float64(len(xs)), &gram)
	n, _ := gram.Dims()
	worst := 0.0
	for i := range n {
		for j := range n {
			want := 0.0
			if i == j {
				want = 1
			}
			worst = max(worst, math.Abs(gram.At(i, j)-want))
		}
	}
	if worst > 1e-6 {
		t.Errorf("modes not orthonormal over the pupil: worst |mean(mᵢmⱼ) − δᵢⱼ| = %.3g", worst)
	}
	for i := 1; i < len(v); i++ {
		if v[i] > v[i-1] {
			t.Fatalf("variance %d = %g above variance %d = %g", i, v[i], i-1, v[i-1])
		}
	}
	if v[len(v)-1] > 1e-6*v[0] {
		t.Errorf("last (piston-like) mode's variance %g, want ~0", v[len(v)-1])
	}
}

// TestKLVariancesAgainstNoll compares the KL variances with Noll's residual
// Kolmogorov phase variances after J Zernike modes, Δ_J (D/r0)^(5/3) (Noll,
// "Zernike polynomials and atmospheric turbulence", J. Opt. Soc. Am. 66, 1976,
// Table IV; values from memory): the first two KL modes are the tilts and hold
// Δ1 − Δ3; the first J−1 KL modes hold at least as much as Zernike modes 2..J,
// KL being the optimal expansion (common practice: within 10% here, for the
// mirror's fitting loss); and all of them together cannot exceed Δ1.
func TestKLVariancesAgainstNoll(t *testing.T) {
	delta := []float64{0, 1.0299, 0.582, 0.134, 0.111, 0.0880, 0.0648, 0.0587, 0.0525, 0.0463, 0.0401, 0.0377}
	_, v, err := KLBasis(klMirror())
	if err != nil {
		t.Fatal(err)
	}
	if tilt, want := v[0]+v[1], delta[1]-delta[3]; math.Abs(tilt-want) > 0.05*want {
		t.Errorf("first two KL variances %.4f, want Noll's tip-tilt %.4f within 5%%", tilt, want)
	}
	sum := 0.0
	for j := 2; j < len(delta); j++ {
		sum += v[j-2]
		if zern := delta[1] - delta[j]; sum < 0.9*zern {
			t.Errorf("first %d KL variances sum to %.4f, below 0.9 × Zernike modes 2..%d's %.4f", j-1, sum, j, zern)
		}
	}
	total := 0.0
	for _, x := range v {
		total += x
	}
	if total > 1.01*delta[1] {
		t.Errorf("KL variances sum to %.4f, above Noll's piston-removed total %.4f (1%% allowed for the sampling)", total, delta[1])
	}
	t.Logf("KL variances (D/r0 = 1): first 5 %.4f, sum %.4f of Δ1 = %.4f", v[:5], total, delta[1])
}

// TestModalReconstructorEqualsZonal checks that the reconstructor built in
// the full KL basis with unit gains is the zonal one, −M⁺, computed here with
// gonum's SVD, for an interaction matrix of full column rank.
func TestModalReconstructorEqualsZonal(t *testing.T) {
	c := klMirror()
	b, _, err := KLBasis(c)
	if err != nil {
		t.Fatal(err)
	}
	na := len(c.Positions)
	ns := 2 * na
	rng := rand.New(rand.NewPCG(1, 2))
	m := mat.NewDense(ns, na, nil)
	for i := range ns {
		for j := range na {
			m.Set(i, j, rng.NormFloat64())
		}
	}
	var svd mat.SVD
	if !svd.Factorize(m, mat.SVDThin) {
		t.Fatal("gonum SVD failed")
	}
	var u, vt mat.Dense
	svd.UTo(&u)
	svd.VTo(&vt)
	sv := svd.Values(nil)
	want := mat.NewDense(na, ns, nil)
	for k, s := range sv {
		for i := range na {
			for j := range ns {
				want.Set(i, j, want.At(i, j)-vt.At(i, k)*u.At(j, k)/s)
			}
		}
	}
	for _, basis := range []*mat.Dense{nil, b} {
		r, err := BuildReconstructor(m, ReconstructorConfig{Method: MethodTruncatedSVD, MaxCondition: 1e6, UnseenCondition: 1e6, KeepPiston: true, Solver: SolverSVD, Basis: basis})
		if err != nil {
			t.Fatal(err)
		}
		gains := make([]float64, r.NumModes())
		for i := range gains {
			gains[i] = 1
		}
		got, err := r.ControlMatrix(gains)
		if err != nil {
			t.Fatal(err)
		}
		var diff mat.Dense
		diff.Sub(got, want)
		if e := mat.Norm(&diff, math.Inf(1)) / mat.Norm(want, math.Inf(1)); e > 1e-9 {
			t.Errorf("basis %v: relative difference from −M⁺ %.3g", basis != nil, e)
		}
	}
}
