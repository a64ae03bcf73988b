package analysis

import "math"

// bandEdgeVariance is the steady-state under-correction of the band above the
// Zernike radial orders 1 … lowOrders that the loop leaves because its mirror is
// not an ideal corrector, in rad², for a mirror of Gaussian influence functions
// (o.Coupling > 0) on the corners of the subapertures (Fried geometry,
// pitch = subaperture d).
//
// By Poisson's summation formula a command wave C at the in-band f shapes the
// surface into G(f_k)·C at every f_k = f + k/d, k ∈ ℤ² (G as in mirrorFitExcess),
// and the sensor, sampling at the same pitch, sees all of them folded onto f:
// its response to the command is W(f) = Σₖ σₖ G(f_k) S(f_k), with σₖ =
// (−1)^(kx+ky) the phase of f_k at the subaperture centres, half a pitch from the
// actuators (the mirror model of Fourier-domain AO simulation; Correia &
// Teixeira, JOSA A 31 (2014) 2763, from memory). The least-squares reconstructor
// of that response nulls the slopes of a wave φ(f) with the command
// C = W·S(f) φ(f)/|W|², which forms κ(f) = G(f) W·S(f)/|W|² of the wave at f. An
// integrator drives the slopes to zero, not the phase: in steady state the loop
// leaves (1 − κ g/(g + ℓ))² − (ℓ/(g + ℓ))² of the wave's power (as the LowOrder
// term does for the Zernike modes; the leak's own share is in servo). κ is 0.885
// a quarter of the band's width from its centre and 0.50 at its edge for coupling
// 0.15 and 4 pupil samples per subaperture; the bench's loop forms 0.89 and 0.56
// of such waves. The modes of radial order n take (n+1)²[2J_{n+1}(πDf)/(πDf)]²
// of the power at f (Noll, JOSA 66 (1976) 207), which the LowOrder term counts
// with the loop's own κⱼ and this one leaves out.
func bandEdgeVariance(o Optics, t Turbulence, l Loop, lowOrders int) float64 {
	phase := spectrum(o, t)
	D, d := o.Diameter, o.Subaperture
	span := o.GradientSpan
	if span == 0 {
		span = d
	}
	g1 := gaussianTransform(o.Coupling, d)
	share := l.Gain / (l.Gain + l.Leak)
	leak := l.Leak / (l.Gain + l.Leak)
	v := 0.0
	overBand(1/(2*d), D, func(fx, fy, f, w float64) {
		p := phase(fx, fy)
		pf := pistonFilter(f, D)
		if p == 0 || pf == 0 {
			return
		}
		x := math.Pi * D * f
		low := 0.0
		for n := 1; n <= lowOrders; n++ {
			b := 2 * math.Jn(n+1, x) / x
			low += float64((n+1)*(n+1)) * b * b
		}
		rest := math.Max(1-low/pf, 0)
		if rest == 0 {
			return
		}
		kappa := mirrorKappa(fx, fy, d, span, g1)
		e := 1 - kappa*share
		v += w * p * rest * (e*e - leak*leak)
	})
	return math.Max(v, 0)
}

// mirrorKappa returns κ(f) = G(f) W·S(f)/|W|² of bandEdgeVariance at the in-band
// (fx, fy), with g1 the influence function's transform per axis over the pitch d.
func mirrorKappa(fx, fy, d, span float64, g1 func(float64) float64) float64 {
	var gx, gy [2*aliasOrders + 1]float64
	for m := -aliasOrders; m <= aliasOrders; m++ {
		gx[m+aliasOrders] = g1(fx + float64(m)/d)
		gy[m+aliasOrders] = g1(fy + float64(m)/d)
	}
	var wx, wy float64
	for m := -aliasOrders; m <= aliasOrders; m++ {
		for n := -aliasOrders; n <= aliasOrders; n++ {
			sx, sy := shResponse(fx+float64(m)/d, fy+float64(n)/d, d, span)
			gk := gx[m+aliasOrders] * gy[n+aliasOrders] * (1 - 2*float64((m+n)&1))
			wx += gk * sx
			wy += gk * sy
		}
	}
	nw := wx*wx + wy*wy
	if nw == 0 {
		return 0
	}
	sx, sy := shResponse(fx, fy, d, span)
	return gx[aliasOrders] * gy[aliasOrders] * (wx*sx + wy*sy) / nw
}

// gaussianTransform returns G(f) = ĝ(f)/p for the influence function
// c^((x/p)²) along one axis: √(π/a) exp(−π²p²f²/a), a = ln(1/c).
func gaussianTransform(coupling, p float64) func(float64) float64 {
	a := math.Log(1 / coupling)
	return func(f float64) float64 { return math.Sqrt(math.Pi/a) * math.Exp(-math.Pi*math.Pi*p*p*f*f/a) }
}
