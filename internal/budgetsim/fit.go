package budgetsim

import (
	"math"

	"gonum.org/v1/gonum/mat"

	"stillsky/sim/bench"
	"stillsky/sim/optics"
)

// fitter finds the mirror shape closest to the turbulence over the pupil: the
// least-squares fit min ‖w·(φ − 2·A·c)‖² over actuator commands c, with A the
// influence functions and w the pupil mask, solved through the normal equations
// (2A)ᵀW(2A) c = (2A)ᵀWφ by Cholesky. The fit's residual is the fitting error.
type fitter struct {
	pupil *optics.Pupil
	cols  [][]int32 // per actuator: pupil samples reached (mask > 0)
	vals  [][]float64
	chol  mat.Cholesky
	rhs   *mat.VecDense
	sol   *mat.VecDense
	res   []float64
	ridge float64
}

func newFitter(sys *bench.System) *fitter {
	p, m := sys.Pupil(), sys.Mirror()
	na, n := m.NumValid(), p.N*p.N
	f := &fitter{pupil: p, cols: make([][]int32, na), vals: make([][]float64, na), res: make([]float64, n)}
	infl := make([]float64, n)
	bySample := make([][]int32, n)
	for k := range na {
		m.Influence(k, infl)
		for i, v := range infl {
			if v != 0 && p.Mask[i] != 0 {
				f.cols[k] = append(f.cols[k], int32(i))
				f.vals[k] = append(f.vals[k], 2*v)
				bySample[i] = append(bySample[i], int32(k))
			}
		}
	}
	g := mat.NewSymDense(na, nil)
	pos := make([]int, na) // cursor into each column, samples are visited in order
	for i, acts := range bySample {
		for a, k := range acts {
			vk := f.vals[k][pos[k]] * p.Mask[i]
			for _, l := range acts[a:] {
				vl := f.vals[l][pos[l]]
				g.SetSym(int(k), int(l), g.At(int(k), int(l))+vk*vl)
			}
		}
		for _, k := range acts {
			pos[k]++
		}
	}
	// Actuators outside the pupil's reach leave G singular; a ridge 1e-9 of its
	// largest diagonal keeps them at zero without changing the fit.
	dmax := 0.0
	for k := range na {
		dmax = math.Max(dmax, g.At(k, k))
	}
	f.ridge = 1e-9 * dmax
	for k := range na {
		g.SetSym(k, k, g.At(k, k)+f.ridge)
	}
	if !f.chol.Factorize(g) {
		panic("budgetsim: mirror fit: normal equations not positive definite")
	}
	f.rhs, f.sol = mat.NewVecDense(na, nil), mat.NewVecDense(na, nil)
	return f
}

// residualRMS returns the rms (piston removed, metres) of the turbulence of the
// system's current frame less its best mirror fit.
func (f *fitter) residualRMS(sys *bench.System) float64 {
	atm := sys.Atmosphere()
	for k, idx := range f.cols {
		s := 0.0
		for j, i := range idx {
			s += f.vals[k][j] * f.pupil.Mask[i] * atm[i]
		}
		f.rhs.SetVec(k, s)
	}
	if err := f.chol.SolveVecTo(f.sol, f.rhs); err != nil {
		panic("budgetsim: mirror fit: " + err.Error())
	}
	copy(f.res, atm)
	for k, idx := range f.cols {
		c := f.sol.AtVec(k)
		for j, i := range idx {
			f.res[i] -= c * f.vals[k][j]
		}
	}
	return optics.ResidualRMS(f.pupil, f.res)
}
