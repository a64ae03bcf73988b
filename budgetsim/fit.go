package budgetsim

import (
	"math"

	"gonum.org/v1/gonum/mat"

	"stillsky/analysis"
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

// lowOrder measures the variance over the pupil of the part of a wavefront that
// the Noll modes 2 … of the budget's low-order term span (least squares, the pupil
// mask as weights).
type lowOrder struct {
	pupil *optics.Pupil
	modes [][]float64
	chol  mat.Cholesky
	g     *mat.SymDense
	rhs   *mat.VecDense
	sol   *mat.VecDense
	buf   []float64
}

// centre removes the pupil-weighted mean (piston) of x over the pupil; x is 0
// outside it.
func centre(p *optics.Pupil, x []float64) {
	s := 0.0
	for i, w := range p.Mask {
		s += w * x[i]
	}
	mean := s / p.Area
	for i, w := range p.Mask {
		if w != 0 {
			x[i] -= mean
		} else {
			x[i] = 0
		}
	}
}

func newLowOrder(p *optics.Pupil) *lowOrder {
	n := analysis.LowOrderModes()
	l := &lowOrder{pupil: p, modes: make([][]float64, n), g: mat.NewSymDense(n, nil), rhs: mat.NewVecDense(n, nil), sol: mat.NewVecDense(n, nil)}
	for m := range n {
		z := make([]float64, p.N*p.N)
		if err := optics.Zernike(m+2, p, z); err != nil {
			panic(err)
		}
		centre(p, z)
		l.modes[m] = z
	}
	l.buf = make([]float64, p.N*p.N)
	for a := range n {
		for b := a; b < n; b++ {
			s := 0.0
			for i, w := range p.Mask {
				s += w * l.modes[a][i] * l.modes[b][i]
			}
			l.g.SetSym(a, b, s)
		}
	}
	if !l.chol.Factorize(l.g) {
		panic("budgetsim: low-order modes: Gram matrix not positive definite")
	}
	return l
}

// coefficients writes the least-squares low-order coefficients of opd (piston
// removed) into out.
func (l *lowOrder) coefficients(opd []float64, out []float64) {
	copy(l.buf, opd)
	centre(l.pupil, l.buf)
	for m, z := range l.modes {
		s := 0.0
		for i, w := range l.pupil.Mask {
			s += w * z[i] * l.buf[i]
		}
		l.rhs.SetVec(m, s)
	}
	if err := l.chol.SolveVecTo(l.sol, l.rhs); err != nil {
		panic("budgetsim: low-order modes: " + err.Error())
	}
	copy(out, l.sol.RawVector().Data)
}

// underCorrection accumulates, mode by mode, the part of the loop's residual
// that is a fixed share of the turbulence's own coefficient (the loop's
// steady-state under-correction), as a regression of the one on the other:
// Σ r a and Σ a² over the frames.
type underCorrection struct {
	low      *lowOrder
	r, a     []float64
	sra, saa []float64
}

func newUnderCorrection(p *optics.Pupil) *underCorrection {
	low := newLowOrder(p)
	n := len(low.modes)
	return &underCorrection{low: low, r: make([]float64, n), a: make([]float64, n), sra: make([]float64, n), saa: make([]float64, n)}
}

func (u *underCorrection) add(residual, turbulence []float64) {
	u.low.coefficients(residual, u.r)
	u.low.coefficients(turbulence, u.a)
	for j := range u.r {
		u.sra[j] += u.r[j] * u.a[j]
		u.saa[j] += u.a[j] * u.a[j]
	}
}

// variance returns the mean variance (m² over the pupil) of the regressed part:
// Σⱼ (Σ r a)²/Σ a² /frames, each mode weighted by its mean square over the pupil.
func (u *underCorrection) variance(frames int) float64 {
	v := 0.0
	for j := range u.sra {
		if u.saa[j] > 0 {
			v += u.sra[j] * u.sra[j] / u.saa[j] * u.low.g.At(j, j) / u.low.pupil.Area
		}
	}
	return v / float64(frames)
}
