package controller

import (
	"fmt"
	"math"
	"math/rand/v2"

	"gonum.org/v1/gonum/blas"
	"gonum.org/v1/gonum/blas/blas64"
	"gonum.org/v1/gonum/lapack/gonum"
	"gonum.org/v1/gonum/mat"
)

// eigenWork is the work of each stage of symEigen, used to report progress in
// one unit across the stages: floating-point operations of the blocked steps,
// with the others weighted by their measured time per operation.
func eigenWork(n int) (tridiag, vectors, back float64) {
	f := float64(n)
	// Householder tridiagonalisation takes 4/3·n³ operations, half of them in
	// matrix–vector products at memory speed: weighted four times (measured
	// here at n = 3365). Inverse iteration is O(n²) but the reorthogonalisation
	// of clusters, which on normal matrices of interaction matrices span most of
	// the spectrum, costs about n³/2 in the same unit. Back-transformation is
	// 2·n³ (Golub & Van Loan, Matrix Computations, 4th ed., §8.3).
	return 16 * f * f * f / 3, f * f * f / 2, 2 * f * f * f
}

// symEigen returns the eigenvalues of the symmetric n×n matrix held in a
// (row-major, lower triangle read, overwritten) in descending order, and the
// matrix whose columns are the matching orthonormal eigenvectors. It is
// LAPACK's route to the symmetric eigenproblem with the tridiagonal step done by
// inverse iteration instead of implicit QL: Householder tridiagonalisation
// T = Qᵀ·A·Q (gonum's Dlatrd and Dsyr2k, blocked as in Dsytrd, so that progress
// can be reported between panels), eigenvalues of T by the root-free QL
// iteration (Dsterf), eigenvectors of T by inverse iteration with
// reorthogonalisation within clusters of close eigenvalues (the method of
// LAPACK's Dstein; Wilkinson, The Algebraic Eigenvalue Problem, 1965, §9.47),
// and back-transformation Z ← Q·Z (Dormqr, blocked). On the normal matrices of
// interaction matrices with thousands of actuators it is tens of times faster
// than gonum's EigenSym, whose implicit QL applies every rotation to the full
// eigenvector matrix.
//
// progress, if not nil, is called with the work done so far (in the units of
// eigenWork, summed over the stages); it is called between panels, never
// concurrently.
func symEigen(a []float64, n int, progress func(done float64)) ([]float64, *mat.Dense, error) {
	if progress == nil {
		progress = func(float64) {}
	}
	if n == 1 {
		return []float64{a[0]}, mat.NewDense(1, 1, []float64{1}), nil
	}
	var impl gonum.Implementation
	bi := blas64.Implementation()
	wTri, wVec, _ := eigenWork(n)

	d := make([]float64, n)
	e := make([]float64, n-1)
	tau := make([]float64, n-1)
	nb := impl.Ilaenv(1, "DSYTRD", "L", n, -1, -1, -1)
	nx := n
	if nb > 1 && nb < n {
		nx = max(nb, impl.Ilaenv(3, "DSYTRD", "L", n, -1, -1, -1))
	} else {
		nb = 1
	}
	work := make([]float64, n*nb)
	// Dsytrd's blocked lower loop: reduce nb columns at a time with Dlatrd and
	// update the trailing matrix with a rank-2nb update, then the rest unblocked.
	i := 0
	if nx < n {
		for ; i < n-nx; i += nb {
			impl.Dlatrd(blas.Lower, n-i, nb, a[i*n+i:], n, e[i:], tau[i:], work, nb)
			bi.Dsyr2k(blas.Lower, blas.NoTrans, n-i-nb, nb, -1, a[(i+nb)*n+i:], n,
				work[nb*nb:], nb, 1, a[(i+nb)*n+i+nb:], n)
			for j := i; j < i+nb; j++ {
				a[(j+1)*n+j] = e[j]
				d[j] = a[j*n+j]
			}
			r := float64(n - i - nb)
			progress(wTri * (1 - r*r*r/float64(n*n*n)))
		}
	}
	impl.Dsytd2(blas.Lower, n-i, a[i*n+i:], n, d[i:], e[i:], tau[i:])
	progress(wTri)

	values := append([]float64(nil), d...)
	off := append([]float64(nil), e...)
	if !impl.Dsterf(n, values, off) {
		return nil, nil, fmt.Errorf("controller: tridiagonal eigenvalues of a %d×%d matrix did not converge", n, n)
	}
	// values ascend. z holds the eigenvectors of T as rows while they are found.
	z := tridiagonalVectors(d, e, values, func(k int) { progress(wTri + wVec*float64(k)/float64(n)) })

	// Back to A's basis: A = Q·T·Qᵀ with Q = diag(1, Q'), Q' the product of the
	// n−1 reflectors stored below the subdiagonal, so A's eigenvectors are Q·zᵢ.
	// Transpose z into columns (ascending), apply Q' to rows 1.. in column
	// panels, and reverse the column order for descending values.
	vec := make([]float64, n*n)
	for r := 0; r < n; r++ {
		for c := 0; c < n; c++ {
			vec[c*n+(n-1-r)] = z[r*n+c]
		}
	}
	lwork := -1
	q := make([]float64, 1)
	impl.Dormqr(blas.Left, blas.NoTrans, n-1, min(n, 256), n-1, a[n:], n, tau, vec[n:], n, q, lwork)
	lwork = max(int(q[0]), n)
	work = make([]float64, lwork)
	const panel = 256
	for c := 0; c < n; c += panel {
		w := min(panel, n-c)
		impl.Dormqr(blas.Left, blas.NoTrans, n-1, w, n-1, a[n:], n, tau, vec[n+c:], n, work, lwork)
		progress(wTri + wVec + 2*float64(n)*float64(n)*float64(c+w))
	}
	for l, r := 0, n-1; l < r; l, r = l+1, r-1 {
		values[l], values[r] = values[r], values[l]
	}
	return values, mat.NewDense(n, n, vec), nil
}

// tridiagonalVectors returns, as the rows of an n×n row-major slice, orthonormal
// eigenvectors of the symmetric tridiagonal matrix with diagonal d and
// off-diagonal e for the ascending eigenvalues w. Each vector comes from three
// steps of inverse iteration with the shifted matrix factored by Gaussian
// elimination with partial pivoting (as LAPACK's Dlagtf and Dlagts); vectors of
// eigenvalues closer than 1e-3·‖T‖ to their neighbour form a cluster and are
// orthogonalised against the cluster's earlier vectors at every step
// (classical Gram–Schmidt, twice; Giraud et al., Numer. Math. 101 (2005) 87),
// and equal eigenvalues get shifts a few rounding errors apart. Outside a
// cluster, orthogonality follows from the accuracy of each vector: the error
// along another eigenvector is about ε‖T‖/gap (Wilkinson 1965). step is called
// after each vector.
func tridiagonalVectors(d, e, w []float64, step func(k int)) []float64 {
	n := len(d)
	tnorm := 0.0
	for i := range d {
		s := math.Abs(d[i])
		if i > 0 {
			s += math.Abs(e[i-1])
		}
		if i < n-1 {
			s += math.Abs(e[i])
		}
		tnorm = max(tnorm, s)
	}
	if tnorm == 0 {
		tnorm = 1
	}
	const eps = 0x1p-52
	ortol := 1e-3 * tnorm
	pertol := 10 * eps * tnorm
	z := make([]float64, n*n)
	f := newTridiagLU(n)
	rng := rand.New(rand.NewPCG(1, 2))
	bi := blas64.Implementation()
	coef := make([]float64, n)
	start, prevShift := 0, 0.0
	for j := 0; j < n; j++ {
		shift := w[j]
		if j > 0 && w[j]-w[j-1] > ortol {
			start = j
		}
		if j > start && shift-prevShift < pertol {
			shift = prevShift + pertol
		}
		prevShift = shift
		f.factor(d, e, shift, eps*tnorm)
		x := z[j*n : (j+1)*n]
		for i := range x {
			x[i] = 2*rng.Float64() - 1
		}
		cluster := z[start*n : j*n]
		for it := 0; it < 3; it++ {
			f.solve(x)
			if k := j - start; k > 0 {
				// x ← x − Cᵀ(C x), twice, with C the cluster's earlier vectors (rows).
				for pass := 0; pass < 2; pass++ {
					bi.Dgemv(blas.NoTrans, k, n, 1, cluster, n, x, 1, 0, coef[:k], 1)
					bi.Dgemv(blas.Trans, k, n, -1, cluster, n, coef[:k], 1, 1, x, 1)
				}
			}
			nrm := bi.Dnrm2(n, x, 1)
			if nrm == 0 || math.IsInf(nrm, 0) || math.IsNaN(nrm) {
				// The solve lost the vector (it was in the span of the cluster or
				// overflowed): restart from another random vector.
				for i := range x {
					x[i] = 2*rng.Float64() - 1
				}
				nrm = bi.Dnrm2(n, x, 1)
			}
			bi.Dscal(n, 1/nrm, x, 1)
		}
		step(j + 1)
	}
	return z
}

// tridiagLU is the factorisation P·(T − λI) = L·U of a tridiagonal matrix with
// row interchanges: U has two superdiagonals, L one multiplier per row.
type tridiagLU struct {
	u1, u2, u3, l []float64
	swap          []bool
}

func newTridiagLU(n int) *tridiagLU {
	return &tridiagLU{u1: make([]float64, n), u2: make([]float64, n), u3: make([]float64, n),
		l: make([]float64, n), swap: make([]bool, n)}
}

// factor eliminates T − shift·I (diagonal d, off-diagonal e), replacing pivots
// smaller than tiny by ±tiny so that the solve amplifies the eigenvector instead
// of dividing by zero (Dlagts' perturbation).
func (f *tridiagLU) factor(d, e []float64, shift, tiny float64) {
	n := len(d)
	// The row still to be eliminated is (a, b) at columns k, k+1.
	a := d[0] - shift
	b := 0.0
	if n > 1 {
		b = e[0]
	}
	for k := 0; k < n-1; k++ {
		sub := e[k]
		diag := d[k+1] - shift
		sup := 0.0
		if k+2 < n {
			sup = e[k+1]
		}
		if math.Abs(a) >= math.Abs(sub) {
			// No interchange: eliminate row k+1 with row k.
			if math.Abs(a) < tiny {
				a = math.Copysign(tiny, a)
			}
			m := sub / a
			f.u1[k], f.u2[k], f.u3[k], f.l[k], f.swap[k] = a, b, 0, m, false
			a, b = diag-m*b, sup
		} else {
			// Interchange rows k and k+1, then eliminate.
			m := a / sub
			f.u1[k], f.u2[k], f.u3[k], f.l[k], f.swap[k] = sub, diag, sup, m, true
			a, b = b-m*diag, -m*sup
		}
	}
	if math.Abs(a) < tiny {
		a = math.Copysign(tiny, a)
	}
	f.u1[n-1], f.u2[n-1], f.u3[n-1] = a, 0, 0
}

// solve overwrites x with (T − shift·I)⁻¹·x using the factorisation.
func (f *tridiagLU) solve(x []float64) {
	n := len(x)
	for k := 0; k < n-1; k++ {
		if f.swap[k] {
			x[k], x[k+1] = x[k+1], x[k]-f.l[k]*x[k+1]
		} else {
			x[k+1] -= f.l[k] * x[k]
		}
	}
	for k := n - 1; k >= 0; k-- {
		s := x[k]
		if k+1 < n {
			s -= f.u2[k] * x[k+1]
		}
		if k+2 < n {
			s -= f.u3[k] * x[k+2]
		}
		x[k] = s / f.u1[k]
	}
	// Rescale when the solve grows the vector towards overflow.
	if m := math.Abs(x[blas64.Implementation().Idamax(n, x, 1)]); m > 1e150 {
		blas64.Implementation().Dscal(n, 1/m, x, 1)
	}
}
