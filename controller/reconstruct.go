package controller

import (
	"fmt"
	"math"
	"time"

	"gonum.org/v1/gonum/mat"
)

// Method says how a reconstructor was made.
type Method uint8

// Reconstruction methods.
const (
	// MethodTruncatedSVD is the Moore–Penrose pseudo-inverse restricted to the
	// largest singular modes: M⁺ = V_k S_k⁻¹ U_kᵀ.
	MethodTruncatedSVD Method = iota
	// MethodTikhonov is regularised least squares, argmin ‖M·x − s‖² + α²‖x‖²,
	// x = (MᵀM + α²I)⁻¹Mᵀs = V diag(sᵢ/(sᵢ² + α²)) Uᵀ s.
	MethodTikhonov
	// MethodMatrix is a control matrix supplied as is, with no modal decomposition.
	MethodMatrix
)

var methodNames = [...]string{MethodTruncatedSVD: "svd", MethodTikhonov: "tikhonov", MethodMatrix: "matrix"}

// String returns "svd", "tikhonov" or "matrix".
func (m Method) String() string {
	if int(m) < len(methodNames) {
		return methodNames[m]
	}
	return fmt.Sprintf("method(%d)", uint8(m))
}

// ParseMethod is the inverse of Method.String.
func ParseMethod(s string) (Method, error) {
	for i, n := range methodNames {
		if n == s {
			return Method(i), nil
		}
	}
	return 0, fmt.Errorf("controller: reconstructor method %q: want svd, tikhonov or matrix", s)
}

// DefaultUnseenCondition is the ratio s_max/sᵢ beyond which a singular mode of the
// interaction matrix counts as unseen by the sensor (*common practice* order of
// magnitude: well above the conditioning of the controlled modes, below noise level).
const DefaultUnseenCondition = 1e3

// DefaultMaxCondition is the truncated-SVD cut used when neither ModesKept nor
// MaxCondition is given (*common practice*: tens). On the Fried-geometry benches of
// this project the spectrum has a gap near it, between the modes the sensor sees
// well and the waffle-like edge modes and piston at noise level.
const DefaultMaxCondition = 30

// ReconstructorConfig chooses how BuildReconstructor inverts the interaction matrix.
type ReconstructorConfig struct {
	// Method is MethodTruncatedSVD or MethodTikhonov.
	Method Method
	// ModesKept, for truncated SVD, is the number of largest singular modes
	// inverted; 0 keeps every mode within MaxCondition.
	ModesKept int
	// MaxCondition, for truncated SVD, keeps modes with s_max/sᵢ <= MaxCondition;
	// 0 means UnseenCondition when ModesKept is set, else DefaultMaxCondition (or
	// UnseenCondition if that is smaller).
	MaxCondition float64
	// Regularization is Tikhonov's α relative to the largest singular value
	// (α_abs = Regularization·s_max); it must be > 0 for MethodTikhonov.
	Regularization float64
	// Basis, if set, is a modal basis (Actuators × modes, one mode per column,
	// metres of surface per unit coefficient): commands are B·a and the modal
	// coefficients are a = (M·B)⁺·s, inverted with Method. Modal gains then apply
	// to these modes. Nil uses the singular modes of M.
	Basis *mat.Dense
	// BasisName names Basis (for example "kl", from KLBasis) in the
	// reconstructor and its file; empty with a nil Basis.
	BasisName string
	// Metric, if set (and Basis nil), builds the reconstructor in the mirror's
	// own modes, MirrorBasisName: the generalised eigenvectors of MᵀM·b = λ·G·b
	// with G = Metric (MirrorMetric: the influence functions' geometric
	// covariance), orthonormal in surface over the pupil, ordered by the
	// sensor's sensitivity λ; modes with √(λ₀/λ) above UnseenCondition (piston,
	// waffle) are cut, and the truncation rule applies to each mode's slope per
	// unit command ‖M·b‖/‖b‖ (see buildMirror), which cuts actuators the pupil
	// hardly sees and keeps tip and tilt.
	// The cut modes are projected out of every command (piston among them
	// when the sensor cannot see it; KeepPiston has no effect). Modal gains
	// then apply per mirror mode. Truncated SVD only; the eigen route serves
	// every size (Solver must be SolverAuto or SolverNormal).
	Metric *mat.SymBandDense
	// UnseenCondition: singular modes of M with s_max/sᵢ above it (or sᵢ = 0) are
	// unseen; they are never controlled and are projected out of every command.
	// 0 means DefaultUnseenCondition.
	UnseenCondition float64
	// KeepPiston leaves the piston (equal command on every actuator) in the
	// commands. By default piston is projected out, as a slope sensor cannot see it;
	// set KeepPiston only for a sensor that does.
	KeepPiston bool
	// Solver picks the factorisation: SolverAuto (the zero value), SolverSVD or
	// SolverNormal.
	Solver Solver
	// Progress, if not nil, is called now and then with the work done and the
	// total (in floating-point operations, estimated), so that a caller with a
	// clock can show the time left. It is called from BuildReconstructor's
	// goroutine.
	Progress func(done, total float64)
	// Created is recorded as the creation time (the controller reads no clock).
	Created time.Time
}

// Solver is the factorisation BuildReconstructor inverts the interaction matrix with.
type Solver uint8

// Solvers.
const (
	// SolverAuto uses SolverNormal from NormalSolverActuators actuators (or basis
	// modes) up, SolverSVD below.
	SolverAuto Solver = iota
	// SolverSVD factorises M = U·S·Vᵀ directly (gonum's SVD, LAPACK's Dgesvd):
	// accurate to the last singular value, but it takes minutes beyond a few
	// thousand actuators on two cores.
	SolverSVD
	// SolverNormal takes the eigen-decomposition of the normal matrix
	// MᵀM = V·S²·Vᵀ, then U_k = M·V_k·S_k⁻¹ (Golub & Van Loan, Matrix
	// Computations, 4th ed., §8.6). It squares the condition number, so
	// singular values below about 1e-7·s_max are lost in rounding; that is far
	// below the unseen-mode cut, which it requires to be <= MaxNormalCondition.
	SolverNormal
)

// NormalSolverActuators is the size from which SolverAuto uses SolverNormal:
// below it gonum's SVD takes seconds or less.
const NormalSolverActuators = 1000

// MaxNormalCondition bounds the unseen-mode and truncation conditions accepted
// with SolverNormal: the eigenvalues of MᵀM carry an absolute error of about
// ε·s_max² (ε = 2.2e-16), so s_max/sᵢ = 1e5 leaves sᵢ² about 1e-6 relative
// accuracy.
const MaxNormalCondition = 1e5

// Reconstructor holds a control matrix and the modal decomposition it came from.
// Treat it as immutable once built; NewParams copies what the hot path needs.
type Reconstructor struct {
	Method            Method
	Slopes, Actuators int
	// Control is R = −M⁺ (Actuators × Slopes, metres of surface per radian) with
	// unit modal gains and unseen modes projected out: Δ = R·s nulls the slopes s.
	Control *mat.Dense
	// Modes (Actuators × NumModes) and Inverse (NumModes × Slopes) factor the
	// reconstruction: M⁺ = Modes·Inverse, with unseen modes already projected out
	// of Modes. Per-mode gains G give R = −Modes·G·Inverse. Both are nil for
	// MethodMatrix.
	Modes, Inverse *mat.Dense
	// SingularValues of the inverted matrix (M, or M·B with a basis), descending.
	SingularValues []float64
	// ModesKept is the number of singular modes of the inverted matrix used.
	ModesKept int
	// Unseen is the dimension of the actuator space projected out of the commands
	// (unseen singular modes of M, plus piston unless kept).
	Unseen int
	// Interaction is the interaction matrix it was built from (Slopes × Actuators),
	// or nil.
	Interaction *mat.Dense
	// Basis names the modal basis of Modes: "" for the singular modes of the
	// interaction matrix, else ReconstructorConfig.BasisName ("kl", or
	// MirrorBasisName for mirror modes).
	Basis string
	// Created is the creation time given by the caller.
	Created time.Time
}

// NumModes returns the number of controllable modes (columns of Modes), which is
// the length of the modal gains; 0 for MethodMatrix.
func (r *Reconstructor) NumModes() int {
	if r.Modes == nil {
		return 0
	}
	_, c := r.Modes.Dims()
	return c
}

// BuildReconstructor computes a reconstructor from the interaction matrix m
// (Slopes × Actuators, the columns measured by push–pull pokes; see the package
// sign convention). It is off the hot path: it allocates and may take seconds for
// large systems.
func BuildReconstructor(m *mat.Dense, c ReconstructorConfig) (*Reconstructor, error) {
	if m == nil {
		return nil, fmt.Errorf("controller: interaction matrix: nil")
	}
	ns, na := m.Dims()
	if err := checkFinite("interaction matrix", m); err != nil {
		return nil, err
	}
	unseenCond := c.UnseenCondition
	if unseenCond == 0 {
		unseenCond = DefaultUnseenCondition
	}
	switch {
	case c.Method != MethodTruncatedSVD && c.Method != MethodTikhonov:
		return nil, fmt.Errorf("controller: reconstructor method %v: want svd or tikhonov", c.Method)
	case !(unseenCond >= 1) || math.IsInf(unseenCond, 0):
		return nil, fmt.Errorf("controller: reconstructor unseen condition %g: must be finite and >= 1", c.UnseenCondition)
	case c.ModesKept < 0:
		return nil, fmt.Errorf("controller: reconstructor modes kept %d: must be >= 0", c.ModesKept)
	case c.MaxCondition != 0 && (!(c.MaxCondition >= 1) || math.IsInf(c.MaxCondition, 0)):
		return nil, fmt.Errorf("controller: reconstructor max condition %g: must be finite and >= 1", c.MaxCondition)
	case c.Method == MethodTikhonov && (!(c.Regularization > 0) || math.IsInf(c.Regularization, 0)):
		return nil, fmt.Errorf("controller: reconstructor regularization %g: must be finite and > 0 for tikhonov", c.Regularization)
	case c.Method == MethodTikhonov && c.ModesKept != 0:
		return nil, fmt.Errorf("controller: reconstructor modes kept %d: only for svd", c.ModesKept)
	}
	basisName := ""
	if c.Basis == nil && c.Metric == nil && c.BasisName != "" {
		return nil, fmt.Errorf("controller: reconstructor basis name %q given without a basis", c.BasisName)
	}
	if c.Basis != nil {
		basisName = c.BasisName
		if basisName == "" {
			basisName = "custom"
		}
		if len(basisName) > 60 {
			return nil, fmt.Errorf("controller: reconstructor basis name of %d bytes: at most 60", len(basisName))
		}
		if r, _ := c.Basis.Dims(); r != na {
			return nil, fmt.Errorf("controller: reconstructor basis has %d rows: want %d actuators", r, na)
		}
		if err := checkFinite("reconstructor basis", c.Basis); err != nil {
			return nil, err
		}
	}

	if c.Metric != nil {
		switch {
		case c.Basis != nil:
			return nil, fmt.Errorf("controller: reconstructor basis and metric: give one (the metric's mirror modes are the basis)")
		case c.BasisName != "" && c.BasisName != MirrorBasisName:
			return nil, fmt.Errorf("controller: reconstructor basis name %q with a metric: want %q or empty", c.BasisName, MirrorBasisName)
		case c.Method != MethodTruncatedSVD:
			return nil, fmt.Errorf("controller: reconstructor method %v with mirror modes: only svd", c.Method)
		case c.Solver != SolverAuto && c.Solver != SolverNormal:
			return nil, fmt.Errorf("controller: reconstructor solver %d with mirror modes: only the normal-matrix route", c.Solver)
		case unseenCond > MaxNormalCondition || c.MaxCondition > MaxNormalCondition:
			return nil, fmt.Errorf("controller: reconstructor condition %g: mirror modes take at most %g", max(unseenCond, c.MaxCondition), float64(MaxNormalCondition))
		}
		return buildMirror(m, c, unseenCond)
	}
	solver := c.Solver
	if solver == SolverAuto {
		size := na
		if c.Basis != nil {
			_, nb := c.Basis.Dims()
			size = max(na, nb)
		}
		solver = SolverSVD
		if size >= NormalSolverActuators {
			solver = SolverNormal
		}
	}
	if solver != SolverSVD && solver != SolverNormal {
		return nil, fmt.Errorf("controller: reconstructor solver %d: unknown", solver)
	}
	if solver == SolverNormal && (unseenCond > MaxNormalCondition || c.MaxCondition > MaxNormalCondition) {
		return nil, fmt.Errorf("controller: reconstructor condition %g: the normal-matrix solver takes at most %g", max(unseenCond, c.MaxCondition), float64(MaxNormalCondition))
	}
	work := newWorkMeter(c.Progress, solver, ns, na, c.Basis)

	f, err := factorize(m, solver, work)
	if err != nil {
		return nil, fmt.Errorf("controller: interaction matrix %d×%d: %w", ns, na, err)
	}
	sv, v := f.values, f.v
	if len(sv) == 0 || !(sv[0] > 0) {
		return nil, fmt.Errorf("controller: interaction matrix %d×%d: all zero", ns, na)
	}
	seen := 0
	for seen < len(sv) && sv[seen] > 0 && sv[0]/sv[seen] <= unseenCond {
		seen++
	}
	q := unseenProjector(v, seen, na, !c.KeepPiston)

	var modes, inverse *mat.Dense
	var values []float64
	var kept int
	if c.Basis == nil {
		values = sv
		kept, err = modesToKeep(c, sv, seen, unseenCond)
		if err != nil {
			return nil, err
		}
		inverse = f.filteredInverse(c, kept)
		modes = mat.DenseCopyOf(v.Slice(0, na, 0, kept))
	} else {
		var mb mat.Dense
		mb.Mul(m, c.Basis)
		bf, err := factorize(&mb, solver, work)
		if err != nil {
			return nil, fmt.Errorf("controller: interaction matrix times basis: %w", err)
		}
		values = bf.values
		if !(values[0] > 0) {
			return nil, fmt.Errorf("controller: interaction matrix times basis: all zero (the sensor sees no basis mode)")
		}
		bseen := 0
		for bseen < len(values) && values[bseen] > 0 && values[0]/values[bseen] <= unseenCond {
			bseen++
		}
		kept, err = modesToKeep(c, values, bseen, unseenCond)
		if err != nil {
			return nil, err
		}
		// (M·B)⁺ = V' F U'ᵀ, the modal coefficients of each basis mode.
		coef := bf.filteredInverse(c, kept)
		_, nb := c.Basis.Dims()
		inverse = mat.NewDense(nb, ns, nil)
		inverse.Mul(bf.v.Slice(0, nb, 0, kept), coef)
		modes = mat.DenseCopyOf(c.Basis)
	}
	unseen := 0
	if q != nil {
		// Modes ← (I − Q·Qᵀ)·Modes removes every unseen direction from the commands.
		var qtm mat.Dense
		qtm.Mul(q.T(), modes)
		var corr mat.Dense
		corr.Mul(q, &qtm)
		modes.Sub(modes, &corr)
		_, unseen = q.Dims()
	}
	var control *mat.Dense
	if f.svd == nil && c.Basis == nil {
		control = f.control(modes, kept, work)
	} else {
		control = mat.NewDense(na, ns, nil)
		control.Mul(modes, inverse)
		control.Scale(-1, control)
	}
	work.finish()
	return &Reconstructor{
		Method: c.Method, Slopes: ns, Actuators: na,
		Control: control, Modes: modes, Inverse: inverse,
		SingularValues: values, ModesKept: kept, Unseen: unseen,
		Interaction: mat.DenseCopyOf(m), Created: c.Created, Basis: basisName,
	}, nil
}

// modesToKeep applies the truncation rule of c to the singular values sv, of
// which the first seen are seen by the sensor.
func modesToKeep(c ReconstructorConfig, sv []float64, seen int, unseenCond float64) (int, error) {
	if c.Method == MethodTikhonov {
		return seen, nil
	}
	maxCond := c.MaxCondition
	switch {
	case maxCond == 0 && c.ModesKept > 0:
		maxCond = unseenCond // the count rules; only unseen modes are excluded
	case maxCond == 0:
		maxCond = min(DefaultMaxCondition, unseenCond)
	}
	byCond := 0
	for byCond < seen && sv[0]/sv[byCond] <= maxCond {
		byCond++
	}
	if c.ModesKept == 0 {
		return byCond, nil
	}
	if c.ModesKept > byCond {
		return 0, fmt.Errorf("controller: reconstructor modes kept %d: only %d modes have condition <= %g", c.ModesKept, byCond, maxCond)
	}
	return c.ModesKept, nil
}

// factorization is the singular spectrum of a matrix A (rows × cols) as
// BuildReconstructor needs it: the singular values (descending), the right
// singular vectors V as columns, and diag(f)·U_kᵀ.
type factorization struct {
	a      mat.Matrix
	values []float64
	v      *mat.Dense
	svd    *mat.SVD   // SolverSVD only
	w      *mat.Dense // SolverNormal: V_k·diag(fᵢ/sᵢ), once computed
	work   *workMeter
}

// factorize returns the singular spectrum of a by the route of solver.
func factorize(a mat.Matrix, solver Solver, work *workMeter) (*factorization, error) {
	rows, cols := a.Dims()
	if solver == SolverSVD {
		var svd mat.SVD
		if !svd.Factorize(a, mat.SVDThin) {
			return nil, fmt.Errorf("SVD did not converge")
		}
		var v mat.Dense
		svd.VTo(&v)
		work.add(svdWork(rows, cols))
		return &factorization{a: a, values: svd.Values(nil), v: &v, svd: &svd, work: work}, nil
	}
	buf := normalMatrix(a)
	work.add(normalWork(rows, cols))
	base := work.done
	lambda, v, err := symEigen(buf, cols, func(d float64) { work.set(base + d) })
	if err != nil {
		return nil, err
	}
	work.set(base + eigenTotal(cols))
	// Singular values sᵢ = √λᵢ; a thin SVD has min(rows, cols) of them, and the
	// normal matrix's rounding can make the smallest λᵢ slightly negative.
	k := min(rows, cols)
	values := make([]float64, k)
	for i := range values {
		values[i] = math.Sqrt(max(lambda[i], 0))
	}
	return &factorization{a: a, values: values, v: mat.DenseCopyOf(v.Slice(0, cols, 0, k)), work: work}, nil
}

// filteredInverse returns diag(fᵢ)·U_kᵀ (k × rows of the factorised matrix) with
// fᵢ = 1/sᵢ (truncated SVD) or sᵢ/(sᵢ² + α²) (Tikhonov, α = Regularization·s_max).
// From the normal matrix, U_k = A·V_k·S_k⁻¹, so diag(fᵢ)·U_kᵀ = (A·V_k·diag(fᵢ/sᵢ))ᵀ:
// fᵢ/sᵢ = 1/sᵢ² or 1/(sᵢ² + α²).
func (f *factorization) filteredInverse(c ReconstructorConfig, k int) *mat.Dense {
	sv := f.values
	rows, cols := f.a.Dims()
	alpha2 := math.Pow(c.Regularization*sv[0], 2)
	filter := func(i int) float64 {
		if c.Method == MethodTikhonov {
			return sv[i] / (sv[i]*sv[i] + alpha2)
		}
		return 1 / sv[i]
	}
	out := mat.NewDense(k, rows, nil)
	if f.svd != nil {
		var u mat.Dense
		f.svd.UTo(&u)
		for i := 0; i < k; i++ {
			fi := filter(i)
			for j := 0; j < rows; j++ {
				out.Set(i, j, fi*u.At(j, i))
			}
		}
		return out
	}
	var ut mat.Dense
	ut.Mul(f.a, f.weights(c, k)) // rows × k; gonum's multiply skips the zeros of the sparse A on the left
	out.Copy(ut.T())
	f.work.add(float64(rows) * float64(cols) * float64(k) / 4)
	return out
}

// weights returns W = V_k·diag(fᵢ/sᵢ) (cols × k) of a normal-matrix
// factorisation, so that diag(fᵢ)·U_kᵀ = (A·W)ᵀ; the filter is kept for control.
func (f *factorization) weights(c ReconstructorConfig, k int) *mat.Dense {
	if f.w != nil {
		return f.w
	}
	sv := f.values
	_, cols := f.a.Dims()
	alpha2 := math.Pow(c.Regularization*sv[0], 2)
	w := mat.DenseCopyOf(f.v.Slice(0, cols, 0, k))
	for i := 0; i < k; i++ {
		s := 1 / (sv[i] * sv[i])
		if c.Method == MethodTikhonov {
			s = 1 / (sv[i]*sv[i] + alpha2)
		}
		for j := 0; j < cols; j++ {
			w.Set(j, i, s*w.At(j, i))
		}
	}
	f.w = w
	return w
}

// control returns R = −Modes·Inverse for a normal-matrix factorisation of the
// interaction matrix A itself (no basis): Inverse = (A·W)ᵀ, so
// Rᵀ = −A·(W·Modesᵀ), which costs one dense na×na product and one with the
// sparse A on the left instead of a dense na × k × ns product. The products go
// in row panels so that progress shows.
func (f *factorization) control(modes *mat.Dense, k int, work *workMeter) *mat.Dense {
	rows, na := f.a.Dims()
	w := f.w
	p := mat.NewDense(na, na, nil)
	const panel = 256
	for r := 0; r < na; r += panel {
		e := min(r+panel, na)
		p.Slice(r, e, 0, na).(*mat.Dense).Mul(w.Slice(r, e, 0, k), modes.T())
		work.add(2 * float64(e-r) * float64(k) * float64(na))
	}
	a := mat.DenseCopyOf(f.a)
	rt := mat.NewDense(rows, na, nil)
	for r := 0; r < rows; r += panel {
		e := min(r+panel, rows)
		rt.Slice(r, e, 0, na).(*mat.Dense).Mul(a.Slice(r, e, 0, na), p)
		work.add(2 * float64(e-r) * float64(na) * float64(na) / 4)
	}
	control := mat.NewDense(na, rows, nil)
	control.Copy(rt.T())
	control.Scale(-1, control)
	return control
}

// unseenProjector returns an orthonormal basis Q (na × q) of the unseen actuator
// space: the right singular vectors seen.. of v, plus the piston direction when
// piston is true. It returns nil when that space is empty.
func unseenProjector(v *mat.Dense, seen, na int, piston bool) *mat.Dense {
	_, nv := v.Dims()
	var cols [][]float64
	for j := seen; j < nv; j++ {
		cols = append(cols, mat.Col(nil, j, v))
	}
	// Actuator directions beyond the thin SVD (more actuators than slopes) are
	// unseen too; complete the basis from the identity by Gram–Schmidt.
	for e := 0; e < na && len(cols)+seen < na; e++ {
		x := make([]float64, na)
		x[e] = 1
		if orthonormalise(x, cols, v, seen) {
			cols = append(cols, x)
		}
	}
	if piston {
		x := make([]float64, na)
		for i := range x {
			x[i] = 1 / math.Sqrt(float64(na))
		}
		if orthonormalise(x, cols, nil, 0) {
			cols = append(cols, x)
		}
	}
	if len(cols) == 0 {
		return nil
	}
	q := mat.NewDense(na, len(cols), nil)
	for j, c := range cols {
		q.SetCol(j, c)
	}
	return q
}

// orthonormalise removes from x its components along the first seen columns of
// v (if v is set) and along cols, then normalises it. It reports false when
// little of x is left (x was already in their span).
func orthonormalise(x []float64, cols [][]float64, v *mat.Dense, seen int) bool {
	n0 := math.Sqrt(dot64(x, x))
	for pass := 0; pass < 2; pass++ { // twice for numerical orthogonality
		for j := 0; j < seen; j++ {
			cj := mat.Col(nil, j, v)
			axpy(x, -dot64(x, cj), cj)
		}
		for _, c := range cols {
			axpy(x, -dot64(x, c), c)
		}
	}
	n := math.Sqrt(dot64(x, x))
	if n < 1e-6*n0 {
		return false
	}
	for i := range x {
		x[i] /= n
	}
	return true
}

func dot64(a, b []float64) float64 {
	var s float64
	for i, v := range a {
		s += v * b[i]
	}
	return s
}

func axpy(y []float64, a float64, x []float64) {
	for i, v := range x {
		y[i] += a * v
	}
}

// ReconstructorFromMatrix wraps a control matrix R (Actuators × Slopes, with the
// package sign convention: Δ = R·s) made elsewhere. It has no modal
// decomposition, so parameter sets built on it take no modal gains.
func ReconstructorFromMatrix(control *mat.Dense, created time.Time) (*Reconstructor, error) {
	if control == nil {
		return nil, fmt.Errorf("controller: control matrix: nil")
	}
	if err := checkFinite("control matrix", control); err != nil {
		return nil, err
	}
	na, ns := control.Dims()
	return &Reconstructor{Method: MethodMatrix, Slopes: ns, Actuators: na, Control: mat.DenseCopyOf(control), Created: created}, nil
}

// ControlMatrix returns −Modes·diag(gains)·Inverse (Actuators × Slopes). Nil
// gains return a copy of Control. Gains must have NumModes finite entries >= 0.
func (r *Reconstructor) ControlMatrix(gains []float64) (*mat.Dense, error) {
	if err := r.Validate(); err != nil {
		return nil, err
	}
	if gains == nil {
		return mat.DenseCopyOf(r.Control), nil
	}
	if r.Modes == nil {
		return nil, fmt.Errorf("controller: modal gains given (%d) but the %v reconstructor has no modes", len(gains), r.Method)
	}
	if len(gains) != r.NumModes() {
		return nil, fmt.Errorf("controller: modal gains length %d: want %d modes", len(gains), r.NumModes())
	}
	for i, g := range gains {
		if !(g >= 0) || math.IsInf(g, 0) {
			return nil, fmt.Errorf("controller: modal gain %d = %g: must be finite and >= 0", i, g)
		}
	}
	scaled := mat.DenseCopyOf(r.Modes)
	for j, g := range gains {
		for i := 0; i < r.Actuators; i++ {
			scaled.Set(i, j, -g*scaled.At(i, j))
		}
	}
	out := mat.NewDense(r.Actuators, r.Slopes, nil)
	out.Mul(scaled, r.Inverse)
	return out, nil
}

// Validate checks the shapes and finiteness of every field.
func (r *Reconstructor) Validate() error {
	if r == nil {
		return fmt.Errorf("controller: reconstructor: nil")
	}
	if r.Method > MethodMatrix {
		return fmt.Errorf("controller: reconstructor method %d: unknown", uint8(r.Method))
	}
	if r.Slopes < 1 || r.Actuators < 1 {
		return fmt.Errorf("controller: reconstructor geometry %d slopes × %d actuators: both must be >= 1", r.Slopes, r.Actuators)
	}
	if err := checkShape("reconstructor control matrix", r.Control, r.Actuators, r.Slopes); err != nil {
		return err
	}
	if (r.Modes == nil) != (r.Inverse == nil) || (r.Modes == nil) != (r.Method == MethodMatrix) {
		return fmt.Errorf("controller: reconstructor %v: modes and inverse must both be set, and only for svd or tikhonov", r.Method)
	}
	if r.Modes != nil {
		_, nm := r.Modes.Dims()
		if err := checkShape("reconstructor modes", r.Modes, r.Actuators, nm); err != nil {
			return err
		}
		if err := checkShape("reconstructor inverse", r.Inverse, nm, r.Slopes); err != nil {
			return err
		}
		if r.ModesKept < 1 || r.ModesKept > nm {
			return fmt.Errorf("controller: reconstructor modes kept %d: must be in [1, %d]", r.ModesKept, nm)
		}
	}
	for i, s := range r.SingularValues {
		if !(s >= 0) || math.IsInf(s, 0) || (i > 0 && s > r.SingularValues[i-1]) {
			return fmt.Errorf("controller: reconstructor singular value %d = %g: must be finite, >= 0 and descending", i, s)
		}
	}
	if r.Interaction != nil {
		if err := checkShape("reconstructor interaction matrix", r.Interaction, r.Slopes, r.Actuators); err != nil {
			return err
		}
	}
	return nil
}

func checkShape(name string, m *mat.Dense, rows, cols int) error {
	if m == nil {
		return fmt.Errorf("controller: %s: nil", name)
	}
	if r, c := m.Dims(); r != rows || c != cols {
		return fmt.Errorf("controller: %s is %d×%d: want %d×%d", name, r, c, rows, cols)
	}
	return checkFinite(name, m)
}

func checkFinite(name string, m *mat.Dense) error {
	r, c := m.Dims()
	if r == 0 || c == 0 {
		return fmt.Errorf("controller: %s is %d×%d: empty", name, r, c)
	}
	for i := 0; i < r; i++ {
		for j := 0; j < c; j++ {
			if v := m.At(i, j); math.IsNaN(v) || math.IsInf(v, 0) {
				return fmt.Errorf("controller: %s entry (%d, %d) = %g: must be finite", name, i, j, v)
			}
		}
	}
	return nil
}
