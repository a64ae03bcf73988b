package controller

import (
	"fmt"
	"math"

	"gonum.org/v1/gonum/blas"
	"gonum.org/v1/gonum/blas/blas64"
	"gonum.org/v1/gonum/lapack/lapack64"
	"gonum.org/v1/gonum/mat"
)

// MirrorBasisName is the basis name of reconstructors built in mirror modes
// (ReconstructorConfig.Metric), kept in their files' MODEBASE keyword.
const MirrorBasisName = "mirror"

// mirrorMetricTiny is the product of two influence functions, relative to
// their peak, below which MirrorMetric drops a sample's contribution: the
// metric's smallest eigenvalue on the built-in mirrors is above 1e-3 of its
// largest, so dropped terms change the modes by about 1e-9 relative.
const mirrorMetricTiny = 1e-12

// MirrorMetric returns the geometric covariance of a mirror's influence
// functions, G_ij = ⟨f_i·f_j⟩, the mean over the mirror of the product of two
// actuators' surfaces per unit command, so that a command x makes a surface of
// mean square xᵀGx. The actuators sit at positions (metres, any origin) with
// the given pitch; as in KLBasis their influence functions are Gaussian,
// f(r) = coupling^((r/pitch)²). The mirror is the disc reaching half a pitch
// beyond the outermost actuator, sampled 4 times per pitch: averaged over the
// mirror rather than the pupil, an actuator outside the pupil costs its full
// surface, so the modes it drives show as poorly seen. Products below 1e-12
// of the peak are left out, so G is a band matrix in the actuators' order, of
// bandwidth the largest index distance between two actuators within reach of
// one sample.
func MirrorMetric(positions [][2]float64, pitch, coupling float64) (*mat.SymBandDense, error) {
	na := len(positions)
	switch {
	case na < 2:
		return nil, fmt.Errorf("controller: mirror metric: %d actuators: want >= 2", na)
	case !(pitch > 0) || math.IsInf(pitch, 0):
		return nil, fmt.Errorf("controller: mirror metric: pitch %g m: must be finite and > 0", pitch)
	case !(coupling > 0 && coupling < 1):
		return nil, fmt.Errorf("controller: mirror metric: coupling %g: must be in (0, 1)", coupling)
	}
	cx, cy := 0.0, 0.0
	for i, p := range positions {
		if math.IsNaN(p[0]) || math.IsNaN(p[1]) || math.IsInf(p[0], 0) || math.IsInf(p[1], 0) {
			return nil, fmt.Errorf("controller: mirror metric: actuator %d position (%g, %g) m: must be finite", i, p[0], p[1])
		}
		cx, cy = cx+p[0]/float64(na), cy+p[1]/float64(na)
	}
	radius := 0.0
	for _, p := range positions {
		radius = max(radius, math.Hypot(p[0]-cx, p[1]-cy))
	}
	radius += pitch / 2
	if radius/pitch > 512 {
		return nil, fmt.Errorf("controller: mirror metric: mirror of %g pitches across: at most 1024", 2*radius/pitch)
	}
	c := KLConfig{Positions: positions, Pitch: pitch, Coupling: coupling}
	lc := math.Log(c.Coupling) // f = exp(lc·(r/pitch)²), lc < 0
	// A sample's pair (i, j) counts when f_i·f_j >= tiny; since f_j <= 1, f_i
	// >= tiny is needed, so actuators farther than reach pitches are skipped.
	reach := math.Sqrt(math.Log(mirrorMetricTiny) / lc)
	cell := func(x float64) int { return int(math.Floor(x / c.Pitch)) }
	cells := map[[2]int][]int{}
	for i, p := range c.Positions {
		k := [2]int{cell(p[0]), cell(p[1])}
		cells[k] = append(cells[k], i)
	}
	span := int(math.Ceil(reach)) + 1
	near := func(x, y float64, out []int) []int {
		out = out[:0]
		cx, cy := cell(x), cell(y)
		for dy := -span; dy <= span; dy++ {
			for dx := -span; dx <= span; dx++ {
				out = append(out, cells[[2]int{cx + dx, cy + dy}]...)
			}
		}
		return out
	}
	xs, ys := KLPupilSamples(2*radius, c.Pitch, 4)
	for i := range xs {
		xs[i], ys[i] = xs[i]+cx, ys[i]+cy
	}
	// Two passes: the bandwidth first, then the sums.
	type term struct {
		i int
		f float64
	}
	var idx []int
	var terms []term
	sample := func(s int) []term {
		terms = terms[:0]
		idx = near(xs[s], ys[s], idx)
		for _, i := range idx {
			p := c.Positions[i]
			dx, dy := (xs[s]-p[0])/c.Pitch, (ys[s]-p[1])/c.Pitch
			if f := math.Exp(lc * (dx*dx + dy*dy)); f >= mirrorMetricTiny {
				terms = append(terms, term{i, f})
			}
		}
		return terms
	}
	k := 0
	for s := range xs {
		for _, a := range sample(s) {
			for _, b := range terms {
				if b.i > a.i+k && a.f*b.f >= mirrorMetricTiny {
					k = b.i - a.i
				}
			}
		}
	}
	k = min(k, na-1)
	stride := k + 1
	data := make([]float64, na*stride)
	w := 1 / float64(len(xs))
	for s := range xs {
		for _, a := range sample(s) {
			for _, b := range terms {
				if b.i >= a.i && a.f*b.f >= mirrorMetricTiny {
					data[a.i*stride+b.i-a.i] += w * a.f * b.f
				}
			}
		}
	}
	for i := range na {
		if !(data[i*stride] > 0) {
			return nil, fmt.Errorf("controller: mirror metric: actuator %d at (%g, %g) m has no surface on the mirror", i, c.Positions[i][0], c.Positions[i][1])
		}
	}
	return mat.NewSymBandDense(na, k, data), nil
}

// bandSolveWork is the work of buildMirror's three band triangular solves
// with n right-hand sides (2·n·k operations each, in matrix products).
func bandSolveWork(n, k int) float64 {
	return 3 * 2 * float64(n) * float64(n) * float64(k)
}

// bandBlock is the row block of bandSolve.
const bandBlock = 64

// bandSolve overwrites the n×m row-major x with U⁻ᵀ·x (t = blas.Trans) or
// U⁻¹·x (blas.NoTrans), U the upper band triangular factor u of bandwidth
// u.K. It substitutes block row by block row of bandBlock rows, each block
// of U within the band copied dense, so that the work is in matrix products
// (gonum's Dgemm, and Dtrsm on the diagonal blocks) rather than in one
// band solve per column.
func bandSolve(u blas64.TriangularBand, t blas.Transpose, x []float64, m int) {
	n, k := u.N, u.K
	bi := blas64.Implementation()
	buf := make([]float64, bandBlock*bandBlock)
	// block copies U[r0:r1, c0:c1] into buf, row-major.
	block := func(r0, r1, c0, c1 int) []float64 {
		w := c1 - c0
		b := buf[:(r1-r0)*w]
		for r := r0; r < r1; r++ {
			for c := c0; c < c1; c++ {
				v := 0.0
				if c >= r && c-r <= k {
					v = u.Data[r*u.Stride+c-r]
				}
				b[(r-r0)*w+c-c0] = v
			}
		}
		return b
	}
	blocks := (n + bandBlock - 1) / bandBlock
	rows := func(b int) (int, int) { return b * bandBlock, min((b+1)*bandBlock, n) }
	if t == blas.Trans {
		// Uᵀ is lower: X_I ← (U_IIᵀ)⁻¹·(X_I − Σ_{J<I} U_JIᵀ·X_J), U_JI ≠ 0 for rows j >= i0 − k.
		for b := range blocks {
			i0, i1 := rows(b)
			for j := max(0, i0-k) / bandBlock; j < b; j++ {
				j0, j1 := rows(j)
				bi.Dgemm(blas.Trans, blas.NoTrans, i1-i0, m, j1-j0, -1, block(j0, j1, i0, i1), i1-i0, x[j0*m:], m, 1, x[i0*m:], m)
			}
			bi.Dtrsm(blas.Left, blas.Upper, blas.Trans, blas.NonUnit, i1-i0, m, 1, block(i0, i1, i0, i1), i1-i0, x[i0*m:], m)
		}
		return
	}
	// X_I ← U_II⁻¹·(X_I − Σ_{J>I} U_IJ·X_J), U_IJ ≠ 0 for columns j <= i1 − 1 + k.
	for b := blocks - 1; b >= 0; b-- {
		i0, i1 := rows(b)
		for j := b + 1; j < blocks && j*bandBlock <= i1-1+k; j++ {
			j0, j1 := rows(j)
			bi.Dgemm(blas.NoTrans, blas.NoTrans, i1-i0, m, j1-j0, -1, block(i0, i1, j0, j1), j1-j0, x[j0*m:], m, 1, x[i0*m:], m)
		}
		bi.Dtrsm(blas.Left, blas.Upper, blas.NoTrans, blas.NonUnit, i1-i0, m, 1, block(i0, i1, i0, i1), i1-i0, x[i0*m:], m)
	}
}

// buildMirror builds the reconstructor of BuildReconstructor in the mirror
// modes of c.Metric. Mirror modes b solve the symmetric-definite generalised
// eigenproblem MᵀM·b = λ·G·b with G the metric (Golub & Van Loan, Matrix
// Computations, 4th ed., §8.7, from memory): they are orthonormal in surface,
// bᵢᵀGbⱼ = δᵢⱼ (unit mean square over the pupil with MirrorMetric), their
// slopes are orthogonal, (M·bᵢ)ᵀ(M·bⱼ) = λᵢδᵢⱼ, and λᵢ is the slope power per
// unit mean square surface: the sensor's sensitivity to the mode, which orders
// them. With G = UᵀU (band Cholesky), C = U⁻ᵀ·MᵀM·U⁻¹ = Z·Λ·Zᵀ by symEigen
// and B = U⁻¹·Z. Modes with √(λ₀/λᵢ) above the unseen condition (piston,
// waffle) are never controlled, nor those that mirrorModesToKeep cuts; the
// cut modes are projected out of the commands. Since the slopes of the modes
// are orthogonal, the modal coefficients are aᵢ = (M·bᵢ)ᵀs/‖M·bᵢ‖², with no
// second factorisation: the cost is that of the zonal normal-matrix route
// plus three band triangular solves with n right-hand sides.
func buildMirror(m *mat.Dense, c ReconstructorConfig, unseenCond float64) (*Reconstructor, error) {
	ns, na := m.Dims()
	gn, gk := c.Metric.SymBand()
	if gn != na {
		return nil, fmt.Errorf("controller: reconstructor metric is %d×%d: want %d×%d actuators", gn, gn, na, na)
	}
	for i := range na {
		for j := i; j <= min(i+gk, na-1); j++ {
			if v := c.Metric.At(i, j); math.IsNaN(v) || math.IsInf(v, 0) {
				return nil, fmt.Errorf("controller: reconstructor metric entry (%d, %d) = %g: must be finite", i, j, v)
			}
		}
	}
	work := &workMeter{report: c.Progress}
	work.total = normalWork(ns, na) + bandSolveWork(na, gk) + eigenTotal(na) +
		float64(ns)*float64(na)*float64(na)/4 + // M·B
		2*float64(na)*float64(na)*float64(na) + 2*float64(ns)*float64(na)*float64(na)/4 // control

	band := c.Metric.RawSymBand() // gonum stores symmetric bands upper
	u := blas64.SymmetricBand{Uplo: blas.Upper, N: na, K: gk, Stride: band.Stride,
		Data: append([]float64(nil), band.Data...)}
	tri, ok := lapack64.Pbtrf(u)
	if !ok {
		return nil, fmt.Errorf("controller: reconstructor metric is not positive definite (influence functions not independent over the mirror)")
	}
	buf := normalMatrix(m)
	work.add(normalWork(ns, na))
	// C = U⁻ᵀ·N·U⁻¹ = U⁻ᵀ·(U⁻ᵀ·N)ᵀ, N being symmetric.
	bandSolve(tri, blas.Trans, buf, na)
	work.add(bandSolveWork(na, gk) / 3)
	transposeSquare(buf, na)
	bandSolve(tri, blas.Trans, buf, na)
	work.add(bandSolveWork(na, gk) / 3)
	base := work.done
	lambda, z, err := symEigen(buf, na, func(d float64) { work.set(base + d) })
	if err != nil {
		return nil, fmt.Errorf("controller: mirror modes: %w", err)
	}
	work.set(base + eigenTotal(na))
	values := make([]float64, na)
	for i := range values {
		values[i] = math.Sqrt(max(lambda[i], 0))
	}
	if !(values[0] > 0) {
		return nil, fmt.Errorf("controller: interaction matrix %d×%d: all zero", ns, na)
	}
	seen := 0
	for seen < na && values[seen] > 0 && values[0]/values[seen] <= unseenCond {
		seen++
	}
	// B = U⁻¹·Z, one mode per column.
	bandSolve(tri, blas.NoTrans, z.RawMatrix().Data, na)
	work.add(bandSolveWork(na, gk) / 3)
	all := z
	var mball mat.Dense
	mball.Mul(m, all.Slice(0, na, 0, seen)) // gonum's multiply skips the zeros of the sparse M on the left
	work.add(float64(ns) * float64(na) * float64(seen) / 4)
	pick, err := mirrorModesToKeep(c, &mball, all, seen, unseenCond)
	if err != nil {
		return nil, err
	}
	kept := len(pick)
	basis := mat.NewDense(na, kept, nil)
	mb := mat.NewDense(ns, kept, nil)
	kv := make([]float64, kept)
	for j, i := range pick {
		basis.SetCol(j, mat.Col(nil, i, all))
		mb.SetCol(j, mat.Col(nil, i, &mball))
		kv[j] = values[i]
	}
	// W = B·diag(1/‖M·bᵢ‖²): Inverse = (M·W)ᵀ = diag(1/‖M·bᵢ‖²)·(M·B)ᵀ.
	wts := mat.DenseCopyOf(basis)
	inverse := mat.NewDense(kept, ns, nil)
	for j := range kept {
		col := mat.Col(nil, j, mb)
		n2 := dot64(col, col)
		for i := range na {
			wts.Set(i, j, wts.At(i, j)/n2)
		}
		for i, v := range col {
			inverse.Set(j, i, v/n2)
		}
	}
	// The cut modes — unseen, or needing large commands per unit slope — are
	// projected out of every command, as the zonal reconstructor projects out
	// its unseen singular modes. Piston is one of them when the sensor cannot
	// see it; a piston command that it sees (the edge of the mirror's surface
	// moves) stays, as in the zonal reconstructor, whose piston projection
	// only takes the part outside its seen modes.
	var cut [][]float64
	in := make([]bool, na)
	for _, i := range pick {
		in[i] = true
	}
	for i := range na {
		if x := mat.Col(nil, i, all); !in[i] && orthonormalise(x, cut, nil, 0) {
			cut = append(cut, x)
		}
	}
	modes := basis
	if len(cut) > 0 {
		q := mat.NewDense(na, len(cut), nil)
		for j, x := range cut {
			q.SetCol(j, x)
		}
		var qtm, corr mat.Dense
		qtm.Mul(q.T(), modes)
		corr.Mul(q, &qtm)
		modes.Sub(modes, &corr)
	}
	f := &factorization{a: m, w: wts}
	control := f.control(modes, kept, work)
	work.finish()
	return &Reconstructor{
		Method: MethodTruncatedSVD, Slopes: ns, Actuators: na,
		Control: control, Modes: modes, Inverse: inverse,
		SingularValues: kv, ModesKept: kept, Unseen: len(cut),
		Interaction: mat.DenseCopyOf(m), Created: c.Created, Basis: MirrorBasisName,
	}, nil
}

// mirrorModesToKeep returns the indices, in order, of the mirror modes kept
// among the first seen columns of b (whose slopes are mb = M·b). The
// truncation rule of c applies to each mode's slope per unit command,
// σᵢ = ‖M·bᵢ‖/‖bᵢ‖, against the largest: the quantity the zonal
// reconstructor cuts its singular values on (for a singular mode vᵢ,
// ‖M·vᵢ‖/‖vᵢ‖ = sᵢ), so that the modes a zonal reconstructor leaves out for
// needing large commands per unit slope — actuators outside the pupil,
// nearly unseen patterns — are left out here too, while the sensitivity per
// unit surface, which falls as the square of spatial frequency on a slope
// sensor, does not cut tip and tilt. ModesKept keeps the first so many.
func mirrorModesToKeep(c ReconstructorConfig, mb, b *mat.Dense, seen int, unseenCond float64) ([]int, error) {
	sigma := make([]float64, seen)
	top := 0.0
	for i := range seen {
		s, n := mat.Col(nil, i, mb), mat.Col(nil, i, b)
		sigma[i] = math.Sqrt(dot64(s, s) / dot64(n, n))
		top = max(top, sigma[i])
	}
	maxCond := c.MaxCondition
	switch {
	case maxCond == 0 && c.ModesKept > 0:
		maxCond = unseenCond
	case maxCond == 0:
		maxCond = min(DefaultMaxCondition, unseenCond)
	}
	var pick []int
	for i, s := range sigma {
		if s > 0 && top/s <= maxCond {
			pick = append(pick, i)
		}
	}
	switch {
	case len(pick) == 0:
		return nil, fmt.Errorf("controller: mirror modes: none within condition %g", maxCond)
	case c.ModesKept > len(pick):
		return nil, fmt.Errorf("controller: reconstructor modes kept %d: only %d mirror modes have condition <= %g", c.ModesKept, len(pick), maxCond)
	case c.ModesKept > 0:
		pick = pick[:c.ModesKept]
	}
	return pick, nil
}

// normalMatrix returns MᵀM (cols × cols, row-major, both triangles) through
// the symmetric rank-k update; gonum's multiply skips the zeros of a sparse
// interaction matrix.
func normalMatrix(a mat.Matrix) []float64 {
	_, cols := a.Dims()
	var n mat.SymDense
	n.SymOuterK(1, mat.DenseCopyOf(a).T())
	buf := make([]float64, cols*cols)
	for i := range cols {
		for j := i; j < cols; j++ {
			v := n.At(i, j)
			buf[i*cols+j], buf[j*cols+i] = v, v
		}
	}
	return buf
}

// transposeSquare transposes the n×n row-major a in place.
func transposeSquare(a []float64, n int) {
	for i := range n {
		for j := i + 1; j < n; j++ {
			a[i*n+j], a[j*n+i] = a[j*n+i], a[i*n+j]
		}
	}
}
