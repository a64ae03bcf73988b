package analysis

import (
	"math"

	"stillsky/sim/optics"
)

// zernikeRadial is the radial polynomial R_n^m(r) (Noll 1976), m >= 0, n − m even.
func zernikeRadial(n, m int, r float64) float64 {
	s := 0.0
	for k := 0; k <= (n-m)/2; k++ {
		c := float64(fact(n-k)) / (float64(fact(k)) * float64(fact((n+m)/2-k)) * float64(fact((n-m)/2-k)))
		if k%2 == 1 {
			c = -c
		}
		s += c * math.Pow(r, float64(n-2*k))
	}
	return s
}

func fact(n int) int64 {
	f := int64(1)
	for i := 2; i <= n; i++ {
		f *= int64(i)
	}
	return f
}

// zernikeMode is Noll mode j with its radial coefficients precomputed.
type zernikeMode struct {
	m     int       // signed azimuthal frequency
	coef  []float64 // coefficient of r^(n−2k), k = 0 …
	n     int
	scale float64 // sqrt(n+1), times √2 for m ≠ 0
}

// zernikeModes caches the modes used so far (the estimator's and the budget's
// are the first few hundred); it is filled at package initialisation.
var zernikeModes = func() []zernikeMode {
	out := make([]zernikeMode, modesUpTo(maxCachedOrder)+1)
	for j := 1; j < len(out); j++ {
		n, m := optics.NollIndex(j)
		am := m
		if am < 0 {
			am = -am
		}
		z := zernikeMode{m: m, n: n, scale: math.Sqrt(float64(n + 1))}
		if m != 0 {
			z.scale *= math.Sqrt2
		}
		for k := 0; k <= (n-am)/2; k++ {
			c := float64(fact(n-k)) / (float64(fact(k)) * float64(fact((n+am)/2-k)) * float64(fact((n-am)/2-k)))
			if k%2 == 1 {
				c = -c
			}
			z.coef = append(z.coef, c)
		}
		out[j] = z
	}
	return out
}()

// maxCachedOrder is the highest radial order in zernikeModes.
const maxCachedOrder = 16

// zernikeAt returns Noll mode j at (x, y) in units of the pupil radius, unit rms
// over the unit disk (Noll 1976), continued as the same polynomial outside it.
func zernikeAt(j int, x, y float64) float64 {
	if j >= len(zernikeModes) {
		return zernikeSlow(j, x, y)
	}
	z := &zernikeModes[j]
	r2 := x*x + y*y
	// Σ c_k r^(n−2k) by Horner in r², times r^(n mod 2)… written for the lowest
	// power r^(n − 2K) = r^|m|.
	v := 0.0
	for _, c := range z.coef {
		v = v*r2 + c
	}
	am := z.m
	if am < 0 {
		am = -am
	}
	if am == 0 {
		return z.scale * v
	}
	// r^|m| cos(|m|θ) and r^|m| sin(|m|θ) are the real and imaginary parts of (x + iy)^|m|.
	re, im := 1.0, 0.0
	for range am {
		re, im = re*x-im*y, re*y+im*x
	}
	if z.m > 0 {
		return z.scale * v * re
	}
	return z.scale * v * im
}

// zernikeSlow evaluates modes beyond the cache.
func zernikeSlow(j int, x, y float64) float64 {
	n, m := optics.NollIndex(j)
	r, th := math.Hypot(x, y), math.Atan2(y, x)
	am := m
	if am < 0 {
		am = -am
	}
	v := math.Sqrt(float64(n+1)) * zernikeRadial(n, am, r)
	switch {
	case m > 0:
		v *= math.Sqrt2 * math.Cos(float64(am)*th)
	case m < 0:
		v *= math.Sqrt2 * math.Sin(float64(am)*th)
	}
	return v
}

// modesUpTo returns the number of Noll modes with radial order <= n:
// (n+1)(n+2)/2.
func modesUpTo(n int) int { return (n + 1) * (n + 2) / 2 }

// orderIntegralPoints is the size of the logarithmic grid (1e-8/D to 200(n+1)/D:
// for Kolmogorov tilt the integrand falls only as f^(1/3) towards 0) of the integrals over
// spatial frequency below; the integrands are smooth in log f.
const orderIntegralPoints = 600

// orderWeights holds, for one radial order, the spatial-frequency grid and the
// weights 2π(n+1) Φ(f) [J_{n+1}(πDf)/(πDf/2)]² f² Δ(ln f) of the integral below,
// for r0 = 1 (the variance scales as r0^(−5/3)).
type orderWeights struct {
	f, w []float64
}

func newOrderWeights(n int, D, L0 float64) orderWeights {
	lo, hi := math.Log(1e-8/D), math.Log(200*float64(n+1)/D)
	du := (hi - lo) / orderIntegralPoints
	o := orderWeights{f: make([]float64, orderIntegralPoints), w: make([]float64, orderIntegralPoints)}
	for i := range orderIntegralPoints {
		f := math.Exp(lo + (float64(i)+0.5)*du)
		x := math.Pi * D * f
		q := math.Jn(n+1, x) / (x / 2)
		o.f[i] = f
		o.w[i] = 2 * math.Pi * float64(n+1) * PhaseSpectrum(f, 1, L0) * q * q * f * f * du
	}
	return o
}

// at returns C_n at separation s = vτ (metres) for r0 = 1.
func (o orderWeights) at(s float64) float64 {
	c := 0.0
	for i, w := range o.w {
		if s == 0 {
			c += w
			continue
		}
		c += w * math.J0(2*math.Pi*o.f[i]*s)
	}
	return c
}

// ZernikeVariance returns the variance in rad² of one Zernike coefficient of
// radial order n >= 1 over a pupil of diameter D, for von Kármán turbulence of
// Fried parameter r0 (at the wavelength of interest) and outer scale L0, with the
// temporal correlation at lag τ for a layer moving at speed v (τ = 0 gives the
// variance):
//
//	C_n(τ) = 2π (n+1) ∫ Φ(f) [J_{n+1}(πDf)/(πDf/2)]² J0(2π f v τ) f df
//
// (Noll, JOSA 66 (1976) 207, for the variance; the lag averages the direction of
// the wind over the modes of one order, which turns cos(2π f·v τ) into J0).
func ZernikeVariance(n int, D, r0, L0, v, tau float64) float64 {
	return newOrderWeights(n, D, L0).at(v*tau) * math.Pow(r0, -5.0/3)
}
