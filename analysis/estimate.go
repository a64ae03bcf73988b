package analysis

import (
	"fmt"
	"math"

	"gonum.org/v1/gonum/mat"
)

// SensorGeometry is the Shack–Hartmann layout as the camera describes it.
type SensorGeometry struct {
	// Subapertures across the square grid.
	Subapertures int
	// Valid lists the row-major grid indices (row × Subapertures + column) of the
	// valid subapertures in slope order; slopes are x, y interleaved per entry.
	Valid []int
	// SubapertureSize on the pupil and PupilDiameter, metres.
	SubapertureSize, PupilDiameter float64
	// Obstruction is the central obstruction as a fraction of the diameter.
	Obstruction float64
	// Wavelength of the sensing band, metres.
	Wavelength float64
}

func (g SensorGeometry) validate() error {
	switch {
	case g.Subapertures < 2:
		return fmt.Errorf("analysis: %d subapertures across: need at least 2", g.Subapertures)
	case len(g.Valid) == 0:
		return fmt.Errorf("analysis: no valid subaperture")
	case !(g.SubapertureSize > 0) || !(g.PupilDiameter > 0) || math.IsInf(g.PupilDiameter, 0):
		return fmt.Errorf("analysis: subaperture %g m, pupil %g m: must be > 0", g.SubapertureSize, g.PupilDiameter)
	case !(g.Wavelength > 0) || math.IsInf(g.Wavelength, 0):
		return fmt.Errorf("analysis: sensing wavelength %g m: must be > 0", g.Wavelength)
	case !(g.Obstruction >= 0 && g.Obstruction < 1):
		return fmt.Errorf("analysis: obstruction %g: must be in [0, 1)", g.Obstruction)
	}
	for _, v := range g.Valid {
		if v < 0 || v >= g.Subapertures*g.Subapertures {
			return fmt.Errorf("analysis: valid subaperture %d outside the %d×%d grid", v, g.Subapertures, g.Subapertures)
		}
	}
	return nil
}

// gauss6 are the 6-point Gauss–Legendre nodes and weights on [−1, 1].
var gauss6 = [6][2]float64{
	{-0.9324695142031521, 0.1713244923791704}, {-0.6612093864662645, 0.3607615730481386},
	{-0.2386191860831969, 0.4679139345726910}, {0.2386191860831969, 0.4679139345726910},
	{0.6612093864662645, 0.3607615730481386}, {0.9324695142031521, 0.1713244923791704},
}

// litSamples is the number of sample points across a partly lit subaperture at
// which the Zernike gradients are averaged over its lit part.
const litSamples = 8

// ZernikeSlopes returns the Shack–Hartmann response to Noll modes 2 … modes+1
// (slopes × modes): the mean gradient of mode j with a unit coefficient (one
// metre rms of optical path over the pupil) over the lit part of each valid
// subaperture, the annulus between Obstruction·D/2 and D/2, as the sensor
// averages it. Over a fully lit subaperture that is the difference of the mode
// across it integrated along its edges, (1/d²)∫[Z(x + d/2, y) − Z(x − d/2, y)] dy
// for x (6-point Gauss–Legendre); over a partly lit one, the mean of the analytic
// gradient (central differences of the polynomial) at the litSamples² points of
// the subaperture inside the annulus.
func ZernikeSlopes(g SensorGeometry, modes int) (*mat.Dense, error) {
	if err := g.validate(); err != nil {
		return nil, err
	}
	R, d := g.PupilDiameter/2, g.SubapertureSize
	z := mat.NewDense(2*len(g.Valid), modes, nil)
	half := float64(g.Subapertures) * d / 2
	const h = 1e-6 // of the radius
	rin := g.Obstruction
	inside := func(x, y float64) bool { r := math.Hypot(x, y); return r <= 1 && r >= rin }
	for k, v := range g.Valid {
		x0 := float64(v%g.Subapertures)*d - half
		y0 := float64(v/g.Subapertures)*d - half
		var pts [][2]float64
		for iy := range litSamples {
			for ix := range litSamples {
				x := (x0 + (float64(ix)+0.5)*d/litSamples) / R
				y := (y0 + (float64(iy)+0.5)*d/litSamples) / R
				if inside(x, y) {
					pts = append(pts, [2]float64{x, y})
				}
			}
		}
		full := len(pts) == litSamples*litSamples &&
			inside(x0/R, y0/R) && inside((x0+d)/R, y0/R) && inside(x0/R, (y0+d)/R) && inside((x0+d)/R, (y0+d)/R)
		if len(pts) == 0 { // a subaperture lit only between the sample points
			pts = append(pts, [2]float64{(x0 + d/2) / R, (y0 + d/2) / R})
		}
		xc, yc := x0+d/2, y0+d/2
		for m := range modes {
			j := m + 2
			var sx, sy float64
			if full {
				for _, q := range gauss6 {
					t := q[0] * d / 2
					sx += q[1] / 2 * (zernikeAt(j, (xc+d/2)/R, (yc+t)/R) - zernikeAt(j, (xc-d/2)/R, (yc+t)/R))
					sy += q[1] / 2 * (zernikeAt(j, (xc+t)/R, (yc+d/2)/R) - zernikeAt(j, (xc+t)/R, (yc-d/2)/R))
				}
				z.Set(2*k, m, sx/d)
				z.Set(2*k+1, m, sy/d)
				continue
			}
			for _, p := range pts {
				sx += zernikeAt(j, p[0]+h, p[1]) - zernikeAt(j, p[0]-h, p[1])
				sy += zernikeAt(j, p[0], p[1]+h) - zernikeAt(j, p[0], p[1]-h)
			}
			n := float64(len(pts)) * 2 * h * R
			z.Set(2*k, m, sx/n)
			z.Set(2*k+1, m, sy/n)
		}
	}
	return z, nil
}

// EstimatorConfig chooses the modes of the turbulence estimate.
type EstimatorConfig struct {
	// FitOrder is the highest radial order fitted to the slopes (0: the smaller of
	// 12 and subapertures − 1). Fitting more orders than are used keeps the power
	// of the higher orders from leaking into the orders used.
	FitOrder int
	// UseOrder is the highest radial order whose variances and correlations enter
	// the estimate (0: FitOrder/2, at least 2).
	UseOrder int
}

// Estimator turns pseudo-open-loop slopes into Zernike coefficients and the
// coefficients' statistics into r0, L0 and the wind speed.
type Estimator struct {
	geom       SensorGeometry
	fit, use   int
	projection *mat.Dense // modes × slopes: radians of phase at the sensing wavelength per slope radian
}

// NewEstimator builds the least-squares projection of the slopes on Noll modes
// 2 … (FitOrder+1)(FitOrder+2)/2.
func NewEstimator(g SensorGeometry, c EstimatorConfig) (*Estimator, error) {
	if err := g.validate(); err != nil {
		return nil, err
	}
	fit := c.FitOrder
	if fit == 0 {
		fit = min(12, g.Subapertures-1)
	}
	use := c.UseOrder
	if use == 0 {
		use = max(2, fit/2)
	}
	nm := modesUpTo(fit) - 1
	switch {
	case fit < 2 || nm > 2*len(g.Valid):
		return nil, fmt.Errorf("analysis: fit order %d: %d modes for %d slopes", fit, nm, 2*len(g.Valid))
	case use < 1 || use > fit:
		return nil, fmt.Errorf("analysis: use order %d: must be in [1, fit order %d]", use, fit)
	}
	z, err := ZernikeSlopes(g, nm)
	if err != nil {
		return nil, err
	}
	var svd mat.SVD
	if !svd.Factorize(z, mat.SVDThin) {
		return nil, fmt.Errorf("analysis: Zernike slope matrix: SVD failed")
	}
	var p mat.Dense
	svd.SolveTo(&p, eye(2*len(g.Valid)), nm)
	p.Scale(2*math.Pi/g.Wavelength, &p)
	return &Estimator{geom: g, fit: fit, use: use, projection: &p}, nil
}

func eye(n int) *mat.Dense {
	m := mat.NewDense(n, n, nil)
	for i := range n {
		m.Set(i, i, 1)
	}
	return m
}

// Projection returns the matrix (modes × slopes) that maps slopes to Zernike
// coefficients in radians at the sensing wavelength; NewProjector(Projection(), M)
// maps closed-loop frames to pseudo-open-loop coefficients.
func (e *Estimator) Projection() *mat.Dense { return e.projection }

// Modes returns the number of coefficients per frame (Noll 2 … ).
func (e *Estimator) Modes() int { r, _ := e.projection.Dims(); return r }

// TurbulenceEstimate is what Estimate found.
type TurbulenceEstimate struct {
	// R0 at 500 nm towards the zenith, metres; R0Sensing along the line of sight
	// at the sensing wavelength.
	R0, R0Sensing float64
	// L0 is the best-fitting outer scale in metres (the edges of its grid, D and
	// 1000·D, mean "at most" and "at least").
	L0 float64
	// Wind is the speed in m/s of the single frozen-flow layer whose modal
	// temporal correlations fit best.
	Wind float64
	// Tau0 is 0.314·R0/Wind, seconds at 500 nm (Roddier 1981).
	Tau0 float64
	// Noise is the mean per-mode noise variance removed, rad² at the sensing
	// wavelength, and Frames the number of frames used.
	Noise  float64
	Frames int
}

// maxEstimateLag bounds the lags of the temporal correlations, in frames.
const maxEstimateLag = 400

// Estimate fits the turbulence to a series of pseudo-open-loop Zernike
// coefficients (frames × Modes, consecutive frames at rate hertz) seen at
// zenith angle zenithDeg. Per mode it takes the autocovariance C(k); the white
// measurement noise sits in C(0) alone, so the signal variance is the quadratic
// extrapolation 3C(1) − 3C(2) + C(3). The variances of radial orders 1 …
// UseOrder are fitted in log by Noll's von Kármán model (ZernikeVariance) over
// a grid of L0, r0 in closed form for each (variance ∝ r0^(−5/3)). The wind is
// then the speed whose modelled correlations C_n(τ)/C_n(0) best match the
// measured ones at the lags before each order's correlation falls to 0.3.
func (e *Estimator) Estimate(series [][]float64, rate, zenithDeg float64) (TurbulenceEstimate, error) {
	nm := e.Modes()
	switch {
	case !(rate > 0) || math.IsInf(rate, 0):
		return TurbulenceEstimate{}, fmt.Errorf("analysis: frame rate %g Hz: must be > 0", rate)
	case !(zenithDeg >= 0 && zenithDeg < 90):
		return TurbulenceEstimate{}, fmt.Errorf("analysis: zenith angle %g°: must be in [0, 90)", zenithDeg)
	case len(series) < 200:
		return TurbulenceEstimate{}, fmt.Errorf("analysis: %d frames: need at least 200", len(series))
	}
	maxLag := min(maxEstimateLag, len(series)/4)
	useModes := modesUpTo(e.use) - 1
	cov := make([][]float64, useModes) // per mode: C(0 … maxLag)
	col := make([]float64, len(series))
	for m := range useModes {
		for k, row := range series {
			if len(row) != nm {
				return TurbulenceEstimate{}, fmt.Errorf("analysis: frame %d has %d coefficients, want %d", k, len(row), nm)
			}
			col[k] = row[m]
		}
		cov[m] = autocovariance(col, maxLag)
	}
	D := e.geom.PupilDiameter
	// Per order: mean signal variance, mean noise, mean correlations.
	orders := e.use
	signal := make([]float64, orders)
	corr := make([][]float64, orders)
	noise := 0.0
	for n := 1; n <= orders; n++ {
		first, last := modesUpTo(n-1)-1, modesUpTo(n)-1 // mode indices of order n
		c := make([]float64, maxLag+1)
		for m := first; m < last; m++ {
			for k := range c {
				c[k] += cov[m][k] / float64(last-first)
			}
		}
		s := 3*c[1] - 3*c[2] + c[3]
		if !(s > 0) {
			return TurbulenceEstimate{}, fmt.Errorf("analysis: radial order %d shows no turbulence", n)
		}
		noise += math.Max(c[0]-s, 0) * float64(last-first)
		signal[n-1] = s
		corr[n-1] = c
	}
	noise /= float64(useModes)
	// r0 and L0.
	best := TurbulenceEstimate{Frames: len(series), Noise: noise}
	bestErr := math.Inf(1)
	for i := 0; i <= 30; i++ {
		L0 := D * math.Pow(1000, float64(i)/30)
		var sum float64
		model := make([]float64, orders)
		for n := 1; n <= orders; n++ {
			model[n-1] = newOrderWeights(n, D, L0).at(0)
			sum += math.Log(model[n-1]) - math.Log(signal[n-1])
		}
		lr := 0.6 * sum / float64(orders) // log r0
		r0 := math.Exp(lr)
		err := 0.0
		for n := range orders {
			d := math.Log(signal[n]) - math.Log(model[n]*math.Pow(r0, -5.0/3))
			err += d * d
		}
		if err < bestErr {
			bestErr, best.L0, best.R0Sensing = err, L0, r0
		}
	}
	best.R0 = R0Zenith500(best.R0Sensing, e.geom.Wavelength, zenithDeg)
	// Wind: lags per order until the measured correlation falls below 0.3.
	type point struct {
		n   int
		tau float64
		rho float64
	}
	var pts []point
	for n := 1; n <= orders; n++ {
		c := corr[n-1]
		for k := 1; k <= maxLag; k++ {
			rho := c[k] / signal[n-1]
			if rho < 0.3 {
				break
			}
			// A few lags per order, spread logarithmically, are enough.
			if k > 4 && int(math.Round(math.Pow(1.25, math.Round(math.Log(float64(k))/math.Log(1.25))))) != k {
				continue
			}
			pts = append(pts, point{n, float64(k) / rate, rho})
		}
	}
	if len(pts) == 0 {
		return best, fmt.Errorf("analysis: the coefficients decorrelate within a frame: too few frames per second for a wind estimate")
	}
	weights := make([]orderWeights, orders)
	var0 := make([]float64, orders)
	for n := 1; n <= orders; n++ {
		weights[n-1] = newOrderWeights(n, D, best.L0)
		var0[n-1] = weights[n-1].at(0)
	}
	cost := func(v float64) float64 {
		s := 0.0
		for _, p := range pts {
			d := p.rho - weights[p.n-1].at(v*p.tau)/var0[p.n-1]
			s += d * d
		}
		return s
	}
	best.Wind = math.Exp(goldenMin(func(x float64) float64 { return cost(math.Exp(x)) }, math.Log(0.1), math.Log(200), 40))
	best.Tau0 = Tau0(best.R0, best.Wind)
	return best, nil
}

// autocovariance returns C(k) = (1/N) Σ (x_i − x̄)(x_{i+k} − x̄) for k = 0 … maxLag.
func autocovariance(x []float64, maxLag int) []float64 {
	mean := 0.0
	for _, v := range x {
		mean += v
	}
	mean /= float64(len(x))
	c := make([]float64, maxLag+1)
	for k := range c {
		s := 0.0
		for i := 0; i+k < len(x); i++ {
			s += (x[i] - mean) * (x[i+k] - mean)
		}
		c[k] = s / float64(len(x))
	}
	return c
}

// goldenMin returns the x in [a, b] that minimises the unimodal f, by golden-section
// search with the given number of steps.
func goldenMin(f func(float64) float64, a, b float64, steps int) float64 {
	const r = 0.6180339887498949
	c, d := b-r*(b-a), a+r*(b-a)
	fc, fd := f(c), f(d)
	for range steps {
		if fc < fd {
			b, d, fd = d, c, fc
			c = b - r*(b-a)
			fc = f(c)
		} else {
			a, c, fc = c, d, fd
			d = a + r*(b-a)
			fd = f(d)
		}
	}
	return (a + b) / 2
}

// SlopeNoise returns the rms (radians, per slope) of the white slope noise that
// explains the noise variance of an estimate: Noise = σ²·mean diag(P Pᵀ) over the
// modes used, with P the projection.
func (e *Estimator) SlopeNoise(est TurbulenceEstimate) float64 {
	modes := modesUpTo(e.use) - 1
	s := 0.0
	for i := range modes {
		r := e.projection.RawRowView(i)
		for _, v := range r {
			s += v * v
		}
	}
	return math.Sqrt(est.Noise / (s / float64(modes)))
}
