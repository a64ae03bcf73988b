package optics

import (
	"fmt"
	"math"
)

// maxZernikeOrder bounds the radial order Zernike accepts (Noll index up to
// (n+1)(n+2)/2 = 1326); the Jacobi recurrence used below stays accurate far beyond
// any modal basis a deformable mirror of this bench can form.
const maxZernikeOrder = 50

// NollIndex returns the radial order n and signed azimuthal frequency m of Noll
// index j >= 1 (Noll 1976): within an order, |m| increases; for m != 0 an even j is
// the cos(mθ) mode (m > 0) and an odd j the sin(mθ) mode (m < 0).
func NollIndex(j int) (n, m int) {
	for (n+1)*(n+2)/2 < j {
		n++
	}
	k := j - n*(n+1)/2 - 1
	am := 2*((k+1-n%2)/2) + n%2
	if am != 0 && j%2 == 1 {
		return n, -am
	}
	return n, am
}

// Zernike writes Noll mode j (j >= 1) on the pupil grid: unit rms over the unit disk
// of radius Diameter/2 (Noll 1976),
//
//	Z_j = sqrt(n+1) R_n^0(r)                    (m = 0)
//	Z_j = sqrt(2(n+1)) R_n^|m|(r) cos(mθ) or sin(|m|θ)  (m ≠ 0)
//
// with r the radius over Diameter/2 and θ measured from +x towards +y. Samples
// outside the unit disk are 0; the central obstruction and spiders are ignored, so
// multiply by the mask where they matter. out must have length N*N.
func Zernike(j int, p *Pupil, out []float64) error {
	if j < 1 {
		return fmt.Errorf("optics: Zernike index %d: must be >= 1 (Noll ordering)", j)
	}
	if len(out) != p.N*p.N {
		return fmt.Errorf("optics: Zernike output length %d: must be N*N = %d", len(out), p.N*p.N)
	}
	n, m := NollIndex(j)
	if n > maxZernikeOrder {
		return fmt.Errorf("optics: Zernike index %d: radial order %d above the supported %d", j, n, maxZernikeOrder)
	}
	am := m
	if am < 0 {
		am = -am
	}
	norm := math.Sqrt(float64(n + 1))
	if m != 0 {
		norm *= math.Sqrt2
	}
	half := p.Diameter / 2
	for iy := 0; iy < p.N; iy++ {
		y := p.Coord(iy) / half
		for ix := 0; ix < p.N; ix++ {
			x := p.Coord(ix) / half
			r := math.Hypot(x, y)
			if r > 1 {
				out[iy*p.N+ix] = 0
				continue
			}
			v := norm * radial(n, am, r)
			switch {
			case m > 0:
				v *= math.Cos(float64(am) * math.Atan2(y, x))
			case m < 0:
				v *= math.Sin(float64(am) * math.Atan2(y, x))
			}
			out[iy*p.N+ix] = v
		}
	}
	return nil
}

// radial evaluates the Zernike radial polynomial through Jacobi polynomials,
// R_n^m(r) = (−1)^k r^m P_k^(m,0)(1 − 2r²) with k = (n − m)/2, using the three-term
// recurrence of P_k^(α,β) (Abramowitz & Stegun 22.7.1), which avoids the
// cancellation of the explicit factorial sum at high order.
func radial(n, m int, r float64) float64 {
	k := (n - m) / 2
	x := 1 - 2*r*r
	a := float64(m)
	p0, p1 := 1.0, (a+1)+(a+2)*(x-1)/2
	pk := p0
	if k >= 1 {
		pk = p1
	}
	for i := 2; i <= k; i++ {
		fi := float64(i)
		c := 2*fi + a
		pk = ((c-1)*(c*(c-2)*x+a*a)*p1 - 2*(fi+a-1)*(fi-1)*c*p0) / (2 * fi * (fi + a) * (c - 2))
		p0, p1 = p1, pk
	}
	if k%2 == 1 {
		pk = -pk
	}
	return math.Pow(r, a) * pk
}
