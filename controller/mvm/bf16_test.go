package mvm

import (
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// friedReconstructor returns the least-squares reconstructor of an n×n
// Shack–Hartmann sensor on a circular pupil with (n+1)×(n+1) actuators at the
// subaperture corners (Fried geometry, *common practice*): actuator-to-slope
// matrix from the corner-difference slope model, pseudo-inverse by truncated
// SVD (gonum), piston and waffle cut. Rows are actuators, columns slopes;
// pos holds each actuator's (row, column) on the corner grid.
func friedReconstructor(n int) (rec *Matrix, m *mat.Dense, pos [][2]float64) {
	type sub struct{ i, j int }
	var subs []sub
	c := float64(n) / 2
	for i := range n {
		for j := range n {
			if math.Hypot(float64(i)+0.5-c, float64(j)+0.5-c) <= c {
				subs = append(subs, sub{i, j})
			}
		}
	}
	used := map[int]int{}
	corner := func(i, j int) int {
		k := i*(n+1) + j
		if _, ok := used[k]; !ok {
			used[k] = len(used)
			pos = append(pos, [2]float64{float64(i), float64(j)})
		}
		return used[k]
	}
	for _, s := range subs {
		corner(s.i, s.j)
		corner(s.i, s.j+1)
		corner(s.i+1, s.j)
		corner(s.i+1, s.j+1)
	}
	m = mat.NewDense(2*len(subs), len(used), nil)
	for k, s := range subs {
		a, b, cc, d := corner(s.i, s.j), corner(s.i, s.j+1), corner(s.i+1, s.j), corner(s.i+1, s.j+1)
		// x slope: right corners minus left; y slope: lower minus upper.
		m.Set(2*k, b, 0.5)
		m.Set(2*k, d, 0.5)
		m.Set(2*k, a, -0.5)
		m.Set(2*k, cc, -0.5)
		m.Set(2*k+1, cc, 0.5)
		m.Set(2*k+1, d, 0.5)
		m.Set(2*k+1, a, -0.5)
		m.Set(2*k+1, b, -0.5)
	}
	var svd mat.SVD
	if !svd.Factorize(m, mat.SVDThin) {
		panic("mvm test: SVD failed")
	}
	var u, v mat.Dense
	svd.UTo(&u)
	svd.VTo(&v)
	sv := svd.Values(nil)
	// R = V·Σ⁺·Uᵀ with the modes below 1e-3 of the largest singular value cut.
	for k, sk := range sv {
		scale := 0.0
		if sk >= 1e-3*sv[0] {
			scale = 1 / sk
		}
		for i := range v.RawMatrix().Rows {
			v.Set(i, k, v.At(i, k)*scale)
		}
	}
	var r mat.Dense
	r.Mul(&v, u.T())
	rows, cols := r.Dims()
	rec, _ = NewMatrix(rows, cols)
	for i := range rows {
		for j := range cols {
			rec.Data[i*cols+j] = float32(r.At(i, j))
		}
	}
	return rec, m, pos
}

// turbulentSlopes returns M·φ for a smooth random phase at the actuator
// positions (random plane waves with a Kolmogorov-like k^(-11/6) amplitude)
// plus white noise of 5% of the slope rms: slopes of the kind a
// reconstructor sees.
func turbulentSlopes(rng *rand.Rand, m *mat.Dense, pos [][2]float64) []float32 {
	rows, cols := m.Dims()
	phi := mat.NewVecDense(cols, nil)
	for range 40 {
		k := 0.2 + 2*rng.Float64()
		amp := math.Pow(k, -11.0/6)
		ph := 2 * math.Pi * rng.Float64()
		dir := 2 * math.Pi * rng.Float64()
		for a := range cols {
			kx, ky := k*math.Cos(dir), k*math.Sin(dir)
			phi.SetVec(a, phi.AtVec(a)+amp*math.Cos(kx*pos[a][1]+ky*pos[a][0]+ph))
		}
	}
	var s mat.VecDense
	s.MulVec(m, phi)
	rms := mat.Norm(&s, 2) / math.Sqrt(float64(rows))
	out := make([]float32, rows)
	for i := range out {
		out[i] = float32(s.AtVec(i) + 0.05*rms*rng.NormFloat64())
	}
	return out
}

// TestBFloat16CommandError measures the command error of bfloat16 storage,
// ‖y_bf16 − y_f32‖/‖y_f32‖, and checks it against the rounding model. Each
// element is stored as a(1+δ) with |δ| ≤ u = 2^-8 (8 significand bits: Kalamkar et al.,
// "A Study of BFLOAT16 for Deep Learning Training", arXiv:1905.12322, 2019;
// *from memory*); with the
// rounding error uniform over an ulp, E[δ²] ≤ u²/3, and the errors of one
// row being independent, E‖e‖² ≤ (u²/3)·Σ_ij (a_ij x_j)² (the standard
// statistical rounding model, Higham 2002, §2.8; *from memory*). The dot
// product averages the errors down: relative to ‖y‖ the bound is u/√3 ≈
// 0.23% for a random matrix, but larger when rows cancel, as a
// reconstructor's do.
func TestBFloat16CommandError(t *testing.T) {
	rng := rand.New(rand.NewPCG(21, 22))
	rec, im, pos := friedReconstructor(16)
	random := randomMatrix(rng, 600, 1200)
	tests := []struct {
		name string
		a    *Matrix
		x    []float32
	}{
		{"random 600x1200", random, randomVector(rng, 1200)},
		{"Fried reconstructor 16x16", rec, turbulentSlopes(rng, im, pos)},
	}
	const u = 1.0 / 256
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			f32, err := New(tc.a, Options{Workers: 1})
			if err != nil {
				t.Fatal(err)
			}
			b16, err := New(tc.a, Options{Workers: 1, Precision: BFloat16})
			if err != nil {
				t.Fatal(err)
			}
			y32, y16 := make([]float32, tc.a.Rows), make([]float32, tc.a.Rows)
			f32.MulVec(y32, tc.x)
			b16.MulVec(y16, tc.x)
			var e2, y2, model float64
			for i := range y32 {
				d := float64(y16[i]) - float64(y32[i])
				e2 += d * d
				y2 += float64(y32[i]) * float64(y32[i])
				for j, a := range tc.a.Row(i) {
					p := float64(a) * float64(tc.x[j])
					model += p * p
				}
			}
			rel := math.Sqrt(e2 / y2)
			bound := math.Sqrt(u * u / 3 * model / y2)
			t.Logf("%s: relative rms command error %.3g%% (model bound %.3g%%)", tc.name, 100*rel, 100*bound)
			// 10% headroom for the sampling fluctuation of e2 over a few hundred
			// rows; the float32 summation error is 1e-6 relative, negligible.
			if rel > 1.1*bound {
				t.Errorf("%s: relative rms error %.3g exceeds the rounding model's %.3g", tc.name, rel, bound)
			}
			if rel == 0 {
				t.Errorf("%s: bfloat16 product equals the float32 one exactly: matrix not narrowed", tc.name)
			}
			f32.Close()
			b16.Close()
		})
	}
}
