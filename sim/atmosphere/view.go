package atmosphere

import (
	"fmt"
	"math"
)

// View is a line of sight through the layers other than the on-axis star at
// infinity that OPD samples.
//
// A beacon at a finite height H (a laser guide star) is seen through a cone: the
// pupil's footprint on a layer at altitude h shrinks about the beacon's axis by
// 1 − h/H, so the layers are sampled over a smaller area than the pupil (the cone
// effect, or focal anisoplanatism; Fried & Belsher 1994, J. Opt. Soc. Am. A 11,
// 277). A direction θ off the axis shifts the footprint on a layer by θ·h, which
// gives the angular anisoplanatism (Fried 1982, J. Opt. Soc. Am. 72, 52). Both
// apply along the line of sight: h is the layer's altitude times sec z.
type View struct {
	// BeaconHeight is the height of the source above the telescope along the line
	// of sight, in metres; 0 or +Inf for a star at infinity.
	BeaconHeight float64
	// OffsetX and OffsetY are the angles of the line of sight from the axis, in
	// radians, towards +x and +y.
	OffsetX, OffsetY float64
}

// onAxis reports whether v is the star at infinity on the axis that OPD samples.
func (v View) onAxis() bool {
	return (v.BeaconHeight == 0 || math.IsInf(v.BeaconHeight, 1)) && v.OffsetX == 0 && v.OffsetY == 0
}

func (v View) validate() error {
	switch {
	case math.IsNaN(v.BeaconHeight) || v.BeaconHeight < 0:
		return fmt.Errorf("atmosphere: view beacon height %g m: must be >= 0 (0 or +Inf for a star at infinity)", v.BeaconHeight)
	case math.IsNaN(v.OffsetX) || math.IsInf(v.OffsetX, 0) || math.Abs(v.OffsetX) > 0.01:
		return fmt.Errorf("atmosphere: view offset x %g rad: must be finite, within ±0.01 rad", v.OffsetX)
	case math.IsNaN(v.OffsetY) || math.IsInf(v.OffsetY, 0) || math.Abs(v.OffsetY) > 0.01:
		return fmt.Errorf("atmosphere: view offset y %g rad: must be finite, within ±0.01 rad", v.OffsetY)
	}
	return nil
}

// OPDView writes the optical path difference, in metres, seen along v at every
// sample of the pupil grid (length N*N), less the piston OPD removes (the grid
// mean of the on-axis subharmonic field), so that OPDView − OPD is exactly what
// the line of sight changes. For the on-axis star at infinity it is OPD itself.
// Otherwise every layer is sampled at its own positions: sample (ix, iy) of the
// pupil, at c + d from the pupil's centre c, reads layer i at
// c + d·(1 − h_i/H) + θ·h_i, with h_i the layer's altitude along the line of sight
// (times sec z). The periodic screens are interpolated sample by sample with the
// same six-point Lagrange stencil as OPD, and the subharmonic plane waves are
// evaluated exactly, so a view with H = +Inf and θ = 0 taken through this path
// agrees with OPD to float32 rounding (TestViewOnAxisPathMatchesOPD). It is slower
// than OPD (one stencil per sample and layer) and allocates nothing; it panics if
// out has the wrong length and returns an error for an invalid view.
func (a *Atmosphere) OPDView(out []float64, v View) error {
	if err := v.validate(); err != nil {
		return err
	}
	if v.onAxis() {
		a.OPD(out)
		return nil
	}
	a.opdGeneral(out, v)
	return nil
}

// opdGeneral is OPDView's path through every layer sample by sample.
func (a *Atmosphere) opdGeneral(out []float64, v View) {
	n := a.p.N
	if len(out) != n*n {
		panic(fmt.Sprintf("atmosphere: OPD length %d, want %d", len(out), n*n))
	}
	clear(out)
	c := float64(n-1) / 2 * a.p.Scale
	// The piston OPD removes, so that the two differ by what the view changes.
	a.subharmonics()
	mean := a.waves.mean(&a.coef)
	for li, l := range a.layers {
		h := a.alt[li]
		k := 1.0
		if v.BeaconHeight > 0 && !math.IsInf(v.BeaconHeight, 1) {
			k = 1 - h/v.BeaconHeight
			if k < 0 {
				k = 0 // a layer above the beacon is not crossed; its footprint is the beacon's point
			}
		}
		sx, sy := v.OffsetX*h, v.OffsetY*h
		sn, cs := math.Sincos(l.theta())
		coef := a.layerCoef(l, cs, sn)
		for iy := 0; iy < n; iy++ {
			y := c + (float64(iy)*a.p.Scale-c)*k + sy
			for ix := 0; ix < n; ix++ {
				x := c + (float64(ix)*a.p.Scale-c)*k + sx
				val := a.sampleLayer(l, x-l.x, y-l.y, cs, sn)
				out[iy*n+ix] += val + a.evalWaves(&coef, x, y)
			}
		}
	}
	for i := range out {
		out[i] -= mean
	}
}

// layerCoef returns the subharmonic coefficients of l alone, blended and
// translated as subharmonics does for all layers together.
func (a *Atmosphere) layerCoef(l *layer, cs, sn float64) (coef shCoef) {
	for p := 0; p < a.gen.levels; p++ {
		dfp := a.df / math.Pow(3, float64(p+1))
		sx, cx := math.Sincos(-2 * math.Pi * dfp * l.x)
		sy, cy := math.Sincos(-2 * math.Pi * dfp * l.y)
		ex := [3]complex128{complex(cx, -sx), 1, complex(cx, sx)}
		ey := [3]complex128{complex(cy, -sy), 1, complex(cy, sy)}
		for i := 0; i < 3; i++ {
			for j := 0; j < 3; j++ {
				v := complex(cs*l.weight, 0)*l.shFrom[p][i][j] + complex(sn*l.weight, 0)*l.shTo[p][i][j]
				coef[p][i][j] = v * ex[i] * ey[j]
			}
		}
	}
	return coef
}

// evalWaves returns Re Σ c·exp(2πi(fx·x + fy·y)) at one point (metres, grid
// coordinates), the field waveTable.eval writes on the grid.
func (a *Atmosphere) evalWaves(c *shCoef, x, y float64) float64 {
	var s float64
	for p := 0; p < a.gen.levels; p++ {
		dfp := a.df / math.Pow(3, float64(p+1))
		snx, csx := math.Sincos(2 * math.Pi * dfp * x)
		sny, csy := math.Sincos(2 * math.Pi * dfp * y)
		ex := [3]complex128{complex(csx, -snx), 1, complex(csx, snx)}
		ey := [3]complex128{complex(csy, -sny), 1, complex(csy, sny)}
		for i := 0; i < 3; i++ {
			for j := 0; j < 3; j++ {
				s += real(c[p][i][j] * ex[i] * ey[j])
			}
		}
	}
	return s
}

// sampleLayer interpolates the periodic screens of l, blended by cos θ and sin θ,
// at the point (x, y) in metres of the screen, times the layer's weight.
func (a *Atmosphere) sampleLayer(l *layer, x, y, cs, sn float64) float64 {
	s := a.size
	u := x / a.p.Scale
	w := y / a.p.Scale
	u -= math.Floor(u/float64(s)) * float64(s)
	w -= math.Floor(w/float64(s)) * float64(s)
	x0, y0 := int(2*u), int(2*w)
	wx, wy := lagrange6(2*u-float64(x0)), lagrange6(2*w-float64(y0))
	plane := a.stride * a.stride
	var acc float64
	for m := 0; m < 6; m++ {
		fyy := y0 - 2 + m
		q := fyy & 1
		ry := (fyy >> 1) % s
		if ry < 0 {
			ry += s
		}
		var row float64
		for j := 0; j < 6; j++ {
			fx := x0 - 2 + j
			p := fx & 1
			rx := (fx >> 1) % s
			if rx < 0 {
				rx += s
			}
			off := (2*q+p)*plane + ry*a.stride + rx
			row += wx[j] * (cs*float64(l.from[off]) + sn*float64(l.to[off]))
		}
		acc += wy[m] * row
	}
	return l.weight * acc
}
