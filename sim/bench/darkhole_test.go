package bench

import (
	"math"
	"testing"

	"gonum.org/v1/gonum/mat"

	"stillsky/sim/optics"
	"stillsky/sim/scenario"
)

// darkHoleScenario is a 16×16 Shack–Hartmann with a 17×17 mirror on an
// unobstructed pupil, noise off: its control radius is (17 − 1)/2 = 8 λ/D.
const darkHoleScenario = `
name: dark-hole
telescope: {diameter_m: 4, obstruction: 0, pupil_samples: 64}
atmosphere:
  r0_m: 0.05
  l0_m: 30
  seed: 11
  layers: [{altitude_m: 0, fraction: 1, wind_speed_m_per_s: 10, wind_direction_deg: 30}]
guide_star: {magnitude: 5, wavelength_m: 6.5e-7, zero_point_photons_per_s_per_m2: 1e10, throughput: 0.3}
wfs: {subapertures: 16, mode: geometric, noise: false}
dm: {actuators: 17, coupling: 0.15, stroke_m: 1e-5}
loop: {frame_rate_hz: 1000, delay_frames: 0}
science: {wavelength_m: 0.8e-6}
`

// TestDarkHoleEdge fits the mirror to independent stretches of turbulence
// (least squares over the pupil, gonum's SVD), integrates the science PSF of
// the residual, and checks that the raw contrast curve shows the dark hole with
// its edge at the control radius (actuators across − 1)/2 · λ/D (*common
// practice*: a Fried-geometry mirror of pitch d corrects spatial frequencies up
// to 1/(2d), which diffract to λ/(2d) = (N − 1)/2 · λ/D): the steepest rise of
// the contrast is within 1 λ/D of it, and the halo's crest just outside is
// more than twice the hole's floor inside (the floor is the Airy rings and the
// fitting error at low frequencies, ~1e-3 here). The fit leaves out the sensor, whose aliasing
// (a third of the fitting error for a Shack–Hartmann, Hardy 1998, *from
// memory*) would fill the hole of this small system without a spatial filter.
func TestDarkHoleEdge(t *testing.T) {
	sc, err := scenario.Parse([]byte(darkHoleScenario))
	if err != nil {
		t.Fatal(err)
	}
	sys, err := NewSystem(sc)
	if err != nil {
		t.Fatal(err)
	}
	na := sys.NumActuators()
	mask := sys.Pupil().Mask
	var inside []int
	for i, a := range mask {
		if a != 0 {
			inside = append(inside, i)
		}
	}
	// F: optical path on the clear samples per metre of command (2× the surface).
	f := mat.NewDense(len(inside), na, nil)
	surface := make([]float64, len(mask))
	for k := range na {
		sys.Mirror().Influence(k, surface)
		for r, i := range inside {
			f.Set(r, k, 2*surface[i])
		}
	}
	var svd mat.SVD
	if !svd.Factorize(f, mat.SVDThin) {
		t.Fatal("SVD did not converge")
	}

	cmd := make([]float32, na)
	slopes := make([]float32, sys.NumSlopes())
	opd := mat.NewVecDense(len(inside), nil)
	for range 40 {
		for range 25 { // 25 ms of 10 m/s wind between exposures: a subaperture
			sys.Advance()
		}
		clear(cmd)
		sys.Observe(cmd, slopes)
		atm := sys.Residual()
		for r, i := range inside {
			opd.SetVec(r, atm[i])
		}
		var fit mat.Dense
		svd.SolveTo(&fit, opd, svd.Rank(1e-10))
		for k := range cmd {
			cmd[k] = float32(fit.At(k, 0))
		}
		sys.Observe(cmd, slopes)
		sys.Expose()
	}
	size := sys.PSFSize()
	psf := make([]float64, size*size)
	sys.Exposure(psf)
	curve := make([]float64, 40)
	n, err := optics.Contrast(psf, size, SciencePad, curve)
	if err != nil {
		t.Fatal(err)
	}
	curve = curve[:n]
	const radius = (17 - 1) / 2
	edge, rise := 0, 0.0
	for r := 2; r+1 < n; r++ {
		if q := curve[r+1] / curve[r]; q > rise {
			edge, rise = r, q
		}
	}
	// The hole's floor (the least contrast inside) and the halo's crest just
	// outside.
	hole, halo := math.Inf(1), 0.0
	for r := radius - 4; r < radius; r++ {
		hole = min(hole, curve[r])
	}
	for r := radius; r <= radius+4; r++ {
		halo = max(halo, curve[r])
	}
	t.Logf("Strehl %.3f; contrast curve %.2g; steepest rise ×%.1f from %d to %d λ/D; hole %.2g, halo %.2g",
		sys.ExposureStrehl(), curve, rise, edge, edge+1, hole, halo)
	if math.Abs(float64(edge)+0.5-radius) > 1 {
		t.Errorf("steepest rise of the contrast between %d and %d λ/D, want within 1 λ/D of the control radius %d λ/D", edge, edge+1, radius)
	}
	if !(halo > 2*hole) {
		t.Errorf("halo outside the control radius %.3g, not twice the dark hole's floor %.3g", halo, hole)
	}
}
