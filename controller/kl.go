package controller

import (
	"fmt"
	"math"
	"sort"

	"gonum.org/v1/gonum/mat"
)

// KLConfig describes the mirror whose Karhunen–Loève modes KLBasis computes:
// Gaussian influence functions on the actuator positions over a circular pupil.
type KLConfig struct {
	// Positions are the actuators' (x, y) in metres, pupil centre at the origin.
	Positions [][2]float64
	// Pitch is the actuator spacing in metres (> 0).
	Pitch float64
	// Coupling is the influence function's value at a neighbouring actuator, in
	// (0, 1): the influence is Coupling^((r/Pitch)²).
	Coupling float64
	// Diameter is the pupil diameter in metres (> 0).
	Diameter float64
	// SamplesPerPitch is the pupil sampling; 0 means 3, or 2 where 3 would
	// pass MaxKLPupilSamples.
	SamplesPerPitch int
}

// MaxKLPupilSamples bounds the pupil samples KLBasis works on: its cost grows
// as actuators × samples², about 4·10⁹ operations at this bound and 300
// actuators.
const MaxKLPupilSamples = 4000

// KLBasis returns the Karhunen–Loève modes of Kolmogorov turbulence seen
// through the mirror (Actuators × Actuators, one mode per column, commands in
// metres per unit coefficient) and their variances, descending, in rad² for
// D/r0 = 1 (multiply by (D/r0)^(5/3)).
//
// The modes diagonalise the piston-removed phase covariance projected on the
// influence functions F: with the pupil inner product G = FᵀWF (W the uniform
// pupil weight) and H = FᵀW·C·WF, where C(x, y) = −½·D(|x − y|) with the
// Kolmogorov structure function D(r) = 6.88 (r/r0)^(5/3), they solve
// H·b = λ·G·b (Roddier, Adaptive Optics in Astronomy, 1999, ch. 2 and 5;
// Dai, J. Opt. Soc. Am. A 13, 1996, from memory). Each mode's surface F·b has
// unit mean square over the pupil and the modes are orthogonal over it; the
// piston-like mode, invisible to the covariance, comes last.
func KLBasis(c KLConfig) (*mat.Dense, []float64, error) {
	na := len(c.Positions)
	spp := c.SamplesPerPitch
	if spp == 0 && c.Pitch > 0 && c.Diameter > 0 {
		// 3 per pitch, or 2 when 3 would pass MaxKLPupilSamples.
		spp = 3
		if xs, _ := KLPupilSamples(c.Diameter, c.Pitch, 3); len(xs) > MaxKLPupilSamples {
			spp = 2
		}
	}
	switch {
	case na < 2:
		return nil, nil, fmt.Errorf("controller: KL basis: %d actuators: want >= 2", na)
	case !(c.Pitch > 0) || math.IsInf(c.Pitch, 0):
		return nil, nil, fmt.Errorf("controller: KL basis: pitch %g m: must be finite and > 0", c.Pitch)
	case !(c.Coupling > 0 && c.Coupling < 1):
		return nil, nil, fmt.Errorf("controller: KL basis: coupling %g: must be in (0, 1)", c.Coupling)
	case !(c.Diameter > 0) || math.IsInf(c.Diameter, 0):
		return nil, nil, fmt.Errorf("controller: KL basis: pupil diameter %g m: must be finite and > 0", c.Diameter)
	case c.SamplesPerPitch < 0 || spp < 1 || spp > 16:
		return nil, nil, fmt.Errorf("controller: KL basis: samples per pitch %d: must be in [1, 16]", c.SamplesPerPitch)
	}
	xs, ys := KLPupilSamples(c.Diameter, c.Pitch, spp)
	np := len(xs)
	if np > MaxKLPupilSamples {
		return nil, nil, fmt.Errorf("controller: KL basis: %d pupil samples (%d per pitch): at most %d (for a mirror this large use the singular-mode basis)", np, spp, MaxKLPupilSamples)
	}
	f := KLInfluence(c, xs, ys)
	// Piston-removed covariance P·C·P (P = I − 11ᵀ/n), r0 = D.
	cov := mat.NewSymDense(np, nil)
	for i := range np {
		for j := i; j < np; j++ {
			r := math.Hypot(xs[i]-xs[j], ys[i]-ys[j]) / c.Diameter
			cov.SetSym(i, j, -0.5*6.88*math.Pow(r, 5.0/3))
		}
	}
	mean := make([]float64, np)
	all := 0.0
	for i := range np {
		for j := range np {
			mean[i] += cov.At(i, j)
		}
		all += mean[i]
		mean[i] /= float64(np)
	}
	all /= float64(np * np)
	for i := range np {
		for j := i; j < np; j++ {
			cov.SetSym(i, j, cov.At(i, j)-mean[i]-mean[j]+all)
		}
	}
	w := 1 / float64(np)
	var g mat.Dense
	g.Mul(f.T(), f)
	g.Scale(w, &g)
	var cf, h mat.Dense
	cf.Mul(cov, f)
	h.Mul(f.T(), &cf)
	h.Scale(w*w, &h)

	var chol mat.Cholesky
	if !chol.Factorize(symmetric(&g)) {
		return nil, nil, fmt.Errorf("controller: KL basis: the influence functions are not independent over the pupil")
	}
	var l mat.TriDense
	chol.LTo(&l)
	// M = L⁻¹·H·L⁻ᵀ.
	var x, m mat.Dense
	if err := x.Solve(&l, &h); err != nil {
		return nil, nil, fmt.Errorf("controller: KL basis: %w", err)
	}
	if err := m.Solve(&l, x.T()); err != nil {
		return nil, nil, fmt.Errorf("controller: KL basis: %w", err)
	}
	var eig mat.EigenSym
	if !eig.Factorize(symmetric(&m), true) {
		return nil, nil, fmt.Errorf("controller: KL basis: eigen-decomposition did not converge")
	}
	vals := eig.Values(nil)
	var u mat.Dense
	eig.VectorsTo(&u)
	// B = L⁻ᵀ·U, columns in order of decreasing variance.
	var b mat.Dense
	if err := b.Solve(l.T(), &u); err != nil {
		return nil, nil, fmt.Errorf("controller: KL basis: %w", err)
	}
	order := make([]int, na)
	for i := range order {
		order[i] = i
	}
	sort.SliceStable(order, func(i, j int) bool { return vals[order[i]] > vals[order[j]] })
	basis := mat.NewDense(na, na, nil)
	variances := make([]float64, na)
	for k, o := range order {
		variances[k] = max(vals[o], 0)
		for i := range na {
			basis.Set(i, k, b.At(i, o))
		}
	}
	return basis, variances, nil
}

// KLPupilSamples returns the centres of the pupil grid KLBasis samples:
// spp samples per pitch, those inside the circle of the given diameter.
func KLPupilSamples(diameter, pitch float64, spp int) (xs, ys []float64) {
	step := pitch / float64(spp)
	n := int(math.Ceil(diameter / step))
	r := diameter / 2
	for iy := range n {
		y := -r + (float64(iy)+0.5)*step
		for ix := range n {
			x := -r + (float64(ix)+0.5)*step
			if x*x+y*y <= r*r {
				xs, ys = append(xs, x), append(ys, y)
			}
		}
	}
	return xs, ys
}

// KLInfluence returns the influence matrix (samples × actuators) of c's
// Gaussian influence functions at the samples (xs, ys).
func KLInfluence(c KLConfig, xs, ys []float64) *mat.Dense {
	f := mat.NewDense(len(xs), len(c.Positions), nil)
	lc := math.Log(c.Coupling) / (c.Pitch * c.Pitch)
	for i := range xs {
		for k, p := range c.Positions {
			dx, dy := xs[i]-p[0], ys[i]-p[1]
			f.Set(i, k, math.Exp(lc*(dx*dx+dy*dy)))
		}
	}
	return f
}

// symmetric returns the symmetric part of the square matrix a.
func symmetric(a *mat.Dense) *mat.SymDense {
	n, _ := a.Dims()
	s := mat.NewSymDense(n, nil)
	for i := range n {
		for j := i; j < n; j++ {
			s.SetSym(i, j, 0.5*(a.At(i, j)+a.At(j, i)))
		}
	}
	return s
}
