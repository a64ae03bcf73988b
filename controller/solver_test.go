package controller_test

import (
	"math"
	"testing"

	"gonum.org/v1/gonum/mat"

	"stillsky/controller"
	"stillsky/sim/bench"
	"stillsky/sim/scenario"
)

// benchInteraction returns the noise-free interaction matrix of a built-in
// scenario's bench, poked one actuator at a time (radians per metre).
func benchInteraction(t *testing.T, name string) *mat.Dense {
	t.Helper()
	sc, err := scenario.Load(name)
	if err != nil {
		t.Fatal(err)
	}
	sys, err := bench.NewSystem(sc)
	if err != nil {
		t.Fatal(err)
	}
	sys.SetTurbulence(false)
	sys.SetNoise(false)
	ns, na := sys.NumSlopes(), sys.NumActuators()
	m := mat.NewDense(ns, na, nil)
	cmd, slopes := make([]float32, na), make([]float32, ns)
	const a = 1e-7
	for j := range na {
		clear(cmd)
		cmd[j] = a
		sys.Observe(cmd, slopes)
		for i, s := range slopes {
			m.Set(i, j, float64(s)/a)
		}
	}
	return m
}

// TestSolversAgree builds the same reconstructors from the default
// scenario's interaction matrix (about 900 slopes × 500 actuators) through
// gonum's SVD and through the eigen-decomposition of the normal matrix, and
// checks them against each other and against the Moore–Penrose conditions
// (Penrose, Proc. Cambridge Phil. Soc. 51 (1955) 406): the pseudo-inverse of
// the seen modes, a truncated one, Tikhonov, a modal basis, and modal gains.
func TestSolversAgree(t *testing.T) {
	if testing.Short() {
		t.Skip("builds ten reconstructors of 500 actuators")
	}
	m := benchInteraction(t, "default")
	_, na := m.Dims()
	// A basis of the first 100 actuator-space directions of a fixed orthonormal
	// set (QR of a smooth random matrix): any full-rank basis serves.
	raw := mat.NewDense(na, 100, nil)
	for i := range na {
		for j := range 100 {
			raw.Set(i, j, math.Sin(float64((i+1)*(j+1))*0.37))
		}
	}
	var qr mat.QR
	qr.Factorize(raw)
	var q mat.Dense
	qr.QTo(&q)
	basis := mat.DenseCopyOf(q.Slice(0, na, 0, 100))

	for _, tc := range []struct {
		name    string
		cfg     controller.ReconstructorConfig
		penrose bool
		tol     float64 // at least; raised to the normal route's accuracy
	}{
		// Every seen mode, piston kept: −Control is the pseudo-inverse of M_k,
		// M truncated to its k seen singular modes by gonum's SVD, and satisfies
		// the Penrose conditions with it.
		{"pseudo-inverse", controller.ReconstructorConfig{MaxCondition: 1e3, UnseenCondition: 1e3, KeepPiston: true}, true, 1e-8},
		{"pseudo-inverse to 1e5", controller.ReconstructorConfig{MaxCondition: 1e5, UnseenCondition: 1e5, KeepPiston: true}, false, 1e-8},
		{"default truncation", controller.ReconstructorConfig{}, false, 1e-8},
		{"modes kept 300", controller.ReconstructorConfig{ModesKept: 300}, false, 1e-8},
		{"tikhonov", controller.ReconstructorConfig{Method: controller.MethodTikhonov, Regularization: 0.05}, false, 1e-8},
		{"basis", controller.ReconstructorConfig{Basis: basis}, false, 1e-8},
	} {
		t.Run(tc.name, func(t *testing.T) {
			var calls int
			last := -1.0
			svdCfg, normCfg := tc.cfg, tc.cfg
			svdCfg.Solver = controller.SolverSVD
			normCfg.Solver = controller.SolverNormal
			normCfg.Progress = func(done, total float64) {
				if done < last || done > total {
					t.Errorf("progress %g of %g after %g", done, total, last)
				}
				last = done
				calls++
			}
			rs, err := controller.BuildReconstructor(m, svdCfg)
			if err != nil {
				t.Fatal(err)
			}
			rn, err := controller.BuildReconstructor(m, normCfg)
			if err != nil {
				t.Fatal(err)
			}
			if calls < 3 || last <= 0 {
				t.Errorf("normal solver reported progress %d times, last %g", calls, last)
			}
			if rs.ModesKept != rn.ModesKept || rs.Unseen != rn.Unseen {
				t.Fatalf("modes kept %d / %d, unseen %d / %d (svd / normal)", rs.ModesKept, rn.ModesKept, rs.Unseen, rn.Unseen)
			}
			// Forming MᵀM squares the condition number κ of the kept modes: the
			// normal route is good to about ε·κ² (Golub & Van Loan, Matrix
			// Computations, 4th ed., §5.3.7).
			kappa := rs.SingularValues[0] / rs.SingularValues[rs.ModesKept-1]
			tol := max(tc.tol, 100*0x1p-52*kappa*kappa)
			t.Logf("κ = %.3g, tolerance %.3g", kappa, tol)
			for i := range rs.ModesKept {
				if d := math.Abs(rs.SingularValues[i]-rn.SingularValues[i]) / rs.SingularValues[0]; d > 1e-10 {
					t.Fatalf("singular value %d: svd %g, normal %g", i, rs.SingularValues[i], rn.SingularValues[i])
				}
			}
			if d := relDiff(rn.Control, rs.Control); !(d < tol) {
				t.Errorf("control matrices differ by %.3g (relative, 2-norm) > %g", d, tol)
			}
			// Gains that depend on the singular value alone: the pupil's symmetry
			// makes pairs of modes degenerate, and each route may pick another
			// basis of such a pair.
			gains := make([]float64, rs.NumModes())
			for i := range gains {
				gains[i] = 0.2 + 0.8*rs.SingularValues[min(i, len(rs.SingularValues)-1)]/rs.SingularValues[0]
			}
			gs, err := rs.ControlMatrix(gains)
			if err != nil {
				t.Fatal(err)
			}
			gn, err := rn.ControlMatrix(gains)
			if err != nil {
				t.Fatal(err)
			}
			if d := relDiff(gn, gs); !(d < tol) {
				t.Errorf("control matrices with modal gains differ by %.3g > %g", d, tol)
			}
			if tc.penrose {
				mk := truncated(m, rs.ModesKept)
				for _, r := range []*controller.Reconstructor{rs, rn} {
					var p mat.Dense
					p.Scale(-1, r.Control)
					checkPenrose(t, mk, &p, tol)
				}
			}
		})
	}
}

// truncated returns U_k·S_k·V_kᵀ, m restricted to its k largest singular modes
// (gonum's SVD).
func truncated(m *mat.Dense, k int) *mat.Dense {
	var svd mat.SVD
	svd.Factorize(m, mat.SVDThin)
	var u, v mat.Dense
	svd.UTo(&u)
	svd.VTo(&v)
	s := svd.Values(nil)
	rows, cols := m.Dims()
	us := mat.DenseCopyOf(u.Slice(0, rows, 0, k))
	for j := range k {
		for i := range rows {
			us.Set(i, j, us.At(i, j)*s[j])
		}
	}
	var out mat.Dense
	out.Mul(us, v.Slice(0, cols, 0, k).T())
	return &out
}
