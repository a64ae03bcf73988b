package optics

import (
	"math"
	"math/cmplx"

	"gonum.org/v1/gonum/dsp/fourier"
)

// plan is a 1-D forward DFT X[k] = Σ x[j] exp(−2πi jk/n) by the Stockham autosort
// algorithm (decimation in frequency, radices 4, 2, 3, 5 and 7, natural order in and
// out, twiddles precomputed). gonum's FFTPACK port, which the tests use as the
// reference, spends most of its time in index arithmetic: for the 192- and 384-point
// transforms of the bench this plan is several times faster (BenchmarkFFT1D). A size
// with a prime factor above 7 falls back to gonum.
type plan struct {
	n        int
	radix    []int
	tw       [][]complex128 // per stage: tw[j*r+k] = exp(−2πi jk/len), len the stage length
	roots    map[int][]complex128
	y        []complex128
	fallback *fourier.CmplxFFT
}

func newPlan(n int) *plan {
	p := &plan{n: n, y: make([]complex128, n), roots: map[int][]complex128{}}
	rest := n
	for rest > 1 {
		r := 0
		for _, c := range []int{4, 2, 3, 5, 7} {
			if rest%c == 0 {
				r = c
				break
			}
		}
		if r == 0 {
			p.radix = nil
			p.fallback = fourier.NewCmplxFFT(n)
			return p
		}
		p.radix = append(p.radix, r)
		rest /= r
	}
	size := n
	for _, r := range p.radix {
		m := size / r
		tw := make([]complex128, m*r)
		for j := 0; j < m; j++ {
			for k := 0; k < r; k++ {
				tw[j*r+k] = cmplx.Rect(1, -2*math.Pi*float64(j*k)/float64(size))
			}
		}
		p.tw = append(p.tw, tw)
		if _, ok := p.roots[r]; !ok {
			rt := make([]complex128, r)
			for k := range rt {
				rt[k] = cmplx.Rect(1, -2*math.Pi*float64(k)/float64(r))
			}
			p.roots[r] = rt
		}
		size = m
	}
	return p
}

// transform replaces x (length n) by its DFT.
func (p *plan) transform(x []complex128) {
	if p.fallback != nil {
		p.fallback.Coefficients(x, x)
		return
	}
	a, b := x[:p.n], p.y[:p.n]
	size, s := p.n, 1
	for st, r := range p.radix {
		m := size / r
		tw := p.tw[st]
		switch r {
		case 4:
			radix4(a, b, tw, m, s)
		case 2:
			radix2(a, b, tw, m, s)
		case 3:
			radix3(a, b, tw, m, s)
		default:
			radixN(a, b, tw, p.roots[r], r, m, s)
		}
		a, b = b, a
		size, s = m, s*r
	}
	if len(p.radix)%2 == 1 {
		copy(x, a)
	}
}

// Each stage reads a[q + s(j + r·m)] for r-point butterflies and writes
// b[q + s(r·j + k)] = w^(jk) · Σ_t a_t exp(−2πi tk/r).

func radix2(a, b, tw []complex128, m, s int) {
	for j := 0; j < m; j++ {
		w1 := tw[j*2+1]
		x0, x1 := a[s*j:s*j+s], a[s*(j+m):s*(j+m)+s]
		y0, y1 := b[s*2*j:s*2*j+s], b[s*(2*j+1):s*(2*j+1)+s]
		x1, y0, y1 = x1[:len(x0)], y0[:len(x0)], y1[:len(x0)]
		for q, a0 := range x0 {
			a1 := x1[q]
			y0[q] = a0 + a1
			y1[q] = (a0 - a1) * w1
		}
	}
}

func radix3(a, b, tw []complex128, m, s int) {
	const h = 0.8660254037844386 // √3/2
	for j := 0; j < m; j++ {
		w1, w2 := tw[j*3+1], tw[j*3+2]
		x0, x1, x2 := a[s*j:s*j+s], a[s*(j+m):s*(j+m)+s], a[s*(j+2*m):s*(j+2*m)+s]
		y0, y1, y2 := b[s*3*j:s*3*j+s], b[s*(3*j+1):s*(3*j+1)+s], b[s*(3*j+2):s*(3*j+2)+s]
		x1, x2 = x1[:len(x0)], x2[:len(x0)]
		y0, y1, y2 = y0[:len(x0)], y1[:len(x0)], y2[:len(x0)]
		for q, a0 := range x0 {
			a1, a2 := x1[q], x2[q]
			t := a1 + a2
			u := a0 - t*0.5
			d := a1 - a2
			v := complex(h*imag(d), -h*real(d)) // −i·(√3/2)·(a1 − a2)
			y0[q] = a0 + t
			y1[q] = (u + v) * w1
			y2[q] = (u - v) * w2
		}
	}
}

func radix4(a, b, tw []complex128, m, s int) {
	for j := 0; j < m; j++ {
		w1, w2, w3 := tw[j*4+1], tw[j*4+2], tw[j*4+3]
		x0, x1 := a[s*j:s*j+s], a[s*(j+m):s*(j+m)+s]
		x2, x3 := a[s*(j+2*m):s*(j+2*m)+s], a[s*(j+3*m):s*(j+3*m)+s]
		y0, y1 := b[s*4*j:s*4*j+s], b[s*(4*j+1):s*(4*j+1)+s]
		y2, y3 := b[s*(4*j+2):s*(4*j+2)+s], b[s*(4*j+3):s*(4*j+3)+s]
		x1, x2, x3 = x1[:len(x0)], x2[:len(x0)], x3[:len(x0)]
		y0, y1, y2, y3 = y0[:len(x0)], y1[:len(x0)], y2[:len(x0)], y3[:len(x0)]
		for q, a0 := range x0 {
			a1, a2, a3 := x1[q], x2[q], x3[q]
			t0, t1 := a0+a2, a0-a2
			t2, d := a1+a3, a1-a3
			t3 := complex(imag(d), -real(d)) // −i·(a1 − a3)
			y0[q] = t0 + t2
			y1[q] = (t1 + t3) * w1
			y2[q] = (t0 - t2) * w2
			y3[q] = (t1 - t3) * w3
		}
	}
}

func radixN(a, b, tw, roots []complex128, r, m, s int) {
	for j := 0; j < m; j++ {
		for q := 0; q < s; q++ {
			for k := 0; k < r; k++ {
				var sum complex128
				for t := 0; t < r; t++ {
					sum += a[q+s*(j+t*m)] * roots[(t*k)%r]
				}
				b[q+s*(r*j+k)] = sum * tw[j*r+k]
			}
		}
	}
}
