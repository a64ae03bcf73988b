package controller

import "gonum.org/v1/gonum/mat"

// workMeter adds up the estimated floating-point operations of
// BuildReconstructor's steps and reports them to the caller's Progress.
type workMeter struct {
	report      func(done, total float64)
	done, total float64
}

// newWorkMeter estimates the total work of building a reconstructor for an
// ns × na interaction matrix with solver (and the basis, if any).
func newWorkMeter(report func(done, total float64), solver Solver, ns, na int, basis *mat.Dense) *workMeter {
	w := &workMeter{report: report}
	step := func(rows, cols int) {
		if solver == SolverSVD {
			w.total += svdWork(rows, cols)
		} else {
			w.total += normalWork(rows, cols) + eigenTotal(cols)
		}
	}
	step(ns, na)
	k := na
	if basis != nil {
		_, k = basis.Dims()
		step(ns, k)
	}
	if solver == SolverNormal {
		w.total += float64(ns) * float64(na) * float64(k) / 4 // U_k from M·V_k
	}
	if solver == SolverNormal && basis == nil {
		// control: W·Modesᵀ dense, then the sparse M times it
		w.total += 2*float64(na)*float64(k)*float64(na) + 2*float64(ns)*float64(na)*float64(na)/4
	} else {
		w.total += 2 * float64(na) * float64(k) * float64(ns) // control = modes · inverse
	}
	return w
}

// svdWork is the cost of gonum's thin SVD with vectors, about 14·m·n² + 8·n³
// for m >= n (Golub & Van Loan, Matrix Computations, 4th ed., Fig. 8.6.1).
func svdWork(m, n int) float64 {
	m, n = max(m, n), min(m, n)
	fm, fn := float64(m), float64(n)
	return 14*fm*fn*fn + 8*fn*fn*fn
}

// normalWork is the cost of MᵀM for a sparse m×n interaction matrix: m·n² for
// a dense one, a quarter of it for the sparsity the multiply skips (measured
// on the built-in scenarios: each slope sees a few actuators).
func normalWork(m, n int) float64 { return float64(m) * float64(n) * float64(n) / 4 }

// eigenTotal is the work symEigen reports for an n×n matrix, with its
// tridiagonalisation weighted four times for being half matrix–vector products,
// which run at memory speed (measured here: 4–5× the time per operation of the
// blocked steps).
func eigenTotal(n int) float64 {
	t, v, b := eigenWork(n)
	return t + v + b
}

func (w *workMeter) add(x float64) { w.set(w.done + x) }

func (w *workMeter) set(x float64) {
	w.done = min(x, w.total)
	if w.report != nil {
		w.report(w.done, w.total)
	}
}

// finish reports the whole work as done.
func (w *workMeter) finish() { w.set(w.total) }
