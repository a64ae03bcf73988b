package controller_test

import (
	"math"
	"math/rand/v2"
	"strings"
	"testing"

	"gonum.org/v1/gonum/mat"

	"stillsky/controller"
	"stillsky/sim/bench"
	"stillsky/sim/dm"
	"stillsky/sim/optics"
	"stillsky/sim/scenario"
	"stillsky/sim/wfs"
)

// planeFit returns the least-squares slopes (a, b) of w over the lit samples
// of pupil p: w ≈ w̄ + a·x + b·y.
func planeFit(p *optics.Pupil, w []float64) (a, b float64) {
	var n, sx, sy, sw, sxx, sxy, syy, sxw, syw float64
	for iy := range p.N {
		for ix := range p.N {
			i := iy*p.N + ix
			if p.Mask[i] == 0 {
				continue
			}
			x, y := p.Coord(ix), p.Coord(iy)
			n++
			sx += x
			sy += y
			sw += w[i]
			sxx += x * x
			sxy += x * y
			syy += y * y
			sxw += x * w[i]
			syw += y * w[i]
		}
	}
	cxx, cxy, cyy := sxx-sx*sx/n, sxy-sx*sy/n, syy-sy*sy/n
	cxw, cyw := sxw-sx*sw/n, syw-sy*sw/n
	det := cxx*cyy - cxy*cxy
	return (cyy*cxw - cxy*cyw) / det, (cxx*cyw - cxy*cxw) / det
}

// TestTiltOffloadKeepsTheCorrection measures the tilt response of the bench's
// deformable mirror (sim/dm) on its surface, puts a tilted, bumpy command on
// it, offloads the command's tip-tilt, and checks on
// the mirror's own surface that the wavefront tilt taken off the deformable
// mirror, 2·(surface before − surface after) fitted by a plane over the pupil,
// equals the tilt handed to the tip-tilt mirror within 2%, and that no plane is
// left in the command.
func TestTiltOffloadKeepsTheCorrection(t *testing.T) {
	p, err := optics.NewPupil(optics.PupilConfig{Diameter: 8, Obstruction: 0.14, N: 96})
	if err != nil {
		t.Fatal(err)
	}
	m, err := dm.New(p, dm.Config{Actuators: 17, Coupling: 0.15, Stroke: 5e-6, Margin: 0.5})
	if err != nil {
		t.Fatal(err)
	}
	pos := m.Positions()
	before := make([]float64, p.N*p.N)
	after := make([]float64, p.N*p.N)
	// The mirror's tilt response ρ, measured once on its surface: the wavefront
	// tilt of a unit-slope plane of commands along x.
	ramp := make([]float32, len(pos))
	for k, q := range pos {
		ramp[k] = float32(1e-7 * q[0])
	}
	m.Surface(ramp, before)
	for i := range before {
		before[i] *= 2
	}
	rho, _ := planeFit(p, before)
	rho /= 1e-7
	t.Logf("tilt response of the 17×17 mirror (%d valid actuators), coupling 0.15: %.3f rad per m/m (2 for a surface that follows the command)", len(pos), rho)
	off, err := controller.NewTiltOffload(pos, 1, rho)
	if err != nil {
		t.Fatal(err)
	}
	const a, b = 1.2e-7, -0.7e-7 // surface slopes, m/m
	cmd := make([]float32, len(pos))
	for k, q := range pos {
		bump := 2e-8 * math.Cos(2*math.Pi*q[0]/2) * math.Cos(2*math.Pi*q[1]/2)
		cmd[k] = float32(a*q[0] + b*q[1] + bump)
	}
	m.Surface(cmd, before)
	tx, ty := off.Apply(cmd)
	m.Surface(cmd, after)
	if math.Abs(tx/(rho*a)-1) > 0.02 || math.Abs(ty/(rho*b)-1) > 0.02 {
		t.Errorf("offloaded tilt (%g, %g) rad: want about (%g, %g), ρ times the command's slopes", tx, ty, rho*a, rho*b)
	}
	diff := make([]float64, len(before))
	for i := range diff {
		diff[i] = 2 * (before[i] - after[i])
	}
	gx, gy := planeFit(p, diff)
	if math.Abs(gx/tx-1) > 0.02 || math.Abs(gy/ty-1) > 0.02 {
		t.Errorf("wavefront tilt taken off the mirror (%g, %g) rad, handed to the tip-tilt mirror (%g, %g): want within 2%%", gx, gy, tx, ty)
	}
	// What remains has no tip-tilt plane left in it.
	if rx, ry := off.Apply(cmd); math.Abs(rx) > 1e-3*math.Abs(tx) || math.Abs(ry) > 1e-3*math.Abs(ty) {
		t.Errorf("second offload found (%g, %g) rad: want none left", rx, ry)
	}

	tt, err := controller.NewTipTilt(controller.TipTiltParams{Gain: 0.3, Stroke: 1e-5})
	if err != nil {
		t.Fatal(err)
	}
	if sat := tt.Offload(tx, ty); sat {
		t.Error("offload within the stroke reported saturation")
	}
	if cx, cy := tt.Command(); cx != tx || cy != ty {
		t.Errorf("tip-tilt command after the offload (%g, %g): want (%g, %g)", cx, cy, tx, ty)
	}
	if n := testing.AllocsPerRun(200, func() { off.Apply(cmd); tt.Offload(0, 0) }); n != 0 {
		t.Errorf("Apply and Offload: %v allocations per frame, want 0", n)
	}
}

func TestTiltOffloadRefused(t *testing.T) {
	square := [][2]float64{{0, 0}, {1, 0}, {0, 1}, {1, 1}}
	for _, tc := range []struct {
		name     string
		pos      [][2]float64
		fraction float64
		response float64
		want     string
	}{
		{"fraction zero", square, 0, 2, "fraction"},
		{"response", square, 1, math.NaN(), "response"},
		{"fraction above one", square, 1.5, 2, "fraction"},
		{"too few", square[:2], 1, 2, "at least 3"},
		{"on a line", [][2]float64{{0, 0}, {1, 1}, {2, 2}}, 1, 2, "on a line"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			if _, err := controller.NewTiltOffload(tc.pos, tc.fraction, tc.response); err == nil || !strings.Contains(err.Error(), tc.want) {
				t.Errorf("error %v: want one naming %q", err, tc.want)
			}
		})
	}
}

// BenchmarkTipTiltFrame is one frame of the tip-tilt loop as the daemon would
// run it: the quad cell's estimate, the integrator's step, and the offload of
// a 17×17 deformable mirror's tip-tilt.
func BenchmarkTipTiltFrame(b *testing.B) {
	p, err := optics.NewPupil(optics.PupilConfig{Diameter: 8, Obstruction: 0.14, N: 64})
	if err != nil {
		b.Fatal(err)
	}
	m, err := dm.New(p, dm.Config{Actuators: 17, Coupling: 0.15, Stroke: 5e-6, Margin: 0.5})
	if err != nil {
		b.Fatal(err)
	}
	off, err := controller.NewTiltOffload(m.Positions(), 0.1, 3.22)
	if err != nil {
		b.Fatal(err)
	}
	qc, err := wfs.NewQuadCell(wfs.QuadCellConfig{SpotSigma: 2.4e-6, Photons: 150, ReadNoise: 3})
	if err != nil {
		b.Fatal(err)
	}
	tt, err := controller.NewTipTilt(controller.TipTiltParams{Gain: 0.3, Leak: 0.001, Stroke: 1e-5})
	if err != nil {
		b.Fatal(err)
	}
	cmd := make([]float32, m.NumValid())
	for k, q := range m.Positions() {
		cmd[k] = float32(1e-8 * q[0])
	}
	rng := rand.New(rand.NewPCG(1, 2))
	b.ReportAllocs()
	for b.Loop() {
		cx, cy := tt.Command()
		mx, my := qc.Sense(2e-7-cx, -1e-7-cy, rng)
		tt.Step(mx, my)
		tt.Offload(off.Apply(cmd))
	}
}

// TestTiltResponseFromReconstructor measures ρ on the lgs bench's
// reconstructor (interaction matrix poked on the calibration source, geometric
// sensor, truncated SVD) and checks it against the mirror's own surface, the
// measurement of TestTiltOffloadKeepsTheCorrection (plane fit of 2·surface of
// a unit-slope command plane, the same 17×17 mirror): within 3%, the
// difference between a plane fitted over the actuators and the tilt the
// subapertures see. WithoutSlopeTilt then ignores uniform slopes entirely and
// leaves the reconstruction of tilt-free slopes unchanged.
func TestTiltResponseFromReconstructor(t *testing.T) {
	scn, err := scenario.Load("lgs")
	if err != nil {
		t.Fatal(err)
	}
	sys, err := bench.NewSystem(scn)
	if err != nil {
		t.Fatal(err)
	}
	sys.SetTurbulence(false)
	sys.SetNoise(false)
	ns, na := sys.NumSlopes(), sys.NumActuators()
	m := mat.NewDense(ns, na, nil)
	cmd, slopes := make([]float32, na), make([]float32, ns)
	const poke = 1e-7
	for k := range na {
		clear(cmd)
		cmd[k] = poke
		sys.Observe(cmd, slopes)
		for i, v := range slopes {
			m.Set(i, k, float64(v)/poke)
		}
	}
	r, err := controller.BuildReconstructor(m, controller.ReconstructorConfig{Method: controller.MethodTruncatedSVD, MaxCondition: 100})
	if err != nil {
		t.Fatal(err)
	}
	pos := sys.Mirror().Positions()
	rho, err := controller.TiltResponse(r, pos)
	if err != nil {
		t.Fatal(err)
	}
	// The surface measurement on the bench's own pupil.
	p := sys.Pupil()
	ramp := make([]float32, na)
	for k, q := range pos {
		ramp[k] = float32(poke * q[0])
	}
	surf := make([]float64, p.N*p.N)
	sys.Mirror().Surface(ramp, surf)
	for i := range surf {
		surf[i] *= 2
	}
	want, _ := planeFit(p, surf)
	want /= poke
	t.Logf("tilt response: %.3f rad per m/m from the reconstructor, %.3f on the surface", rho, want)
	if math.Abs(rho/want-1) > 0.03 {
		t.Errorf("ρ %.3f from the reconstructor, %.3f on the surface: want within 3%%", rho, want)
	}

	f := r.WithoutSlopeTilt()
	if _, err := controller.TiltResponse(f, pos); err == nil {
		t.Error("a tilt-filtered reconstructor has a tilt response")
	}
	rng := rand.New(rand.NewPCG(1, 2))
	s := make([]float64, ns)
	var mx, my float64
	for i := range s {
		s[i] = rng.NormFloat64()
		if i%2 == 0 {
			mx += s[i]
		} else {
			my += s[i]
		}
	}
	for i := range s {
		s[i] -= [2]float64{mx, my}[i%2] / float64(ns/2)
	}
	var a, b, u mat.VecDense
	a.MulVec(r.Control, mat.NewVecDense(ns, s))
	b.MulVec(f.Control, mat.NewVecDense(ns, s))
	tilted := make([]float64, ns)
	for i := range tilted {
		tilted[i] = s[i] + [2]float64{3, -2}[i%2]
	}
	u.MulVec(f.Control, mat.NewVecDense(ns, tilted))
	var d1, d2 mat.VecDense
	d1.SubVec(&a, &b)
	d2.SubVec(&u, &b)
	if n := mat.Norm(&d1, 2) / mat.Norm(&a, 2); n > 1e-12 {
		t.Errorf("tilt-free slopes reconstructed differently by the filtered reconstructor: relative %g", n)
	}
	if n := mat.Norm(&d2, 2) / mat.Norm(&a, 2); n > 1e-12 {
		t.Errorf("the filtered reconstructor sees added tip-tilt: relative %g", n)
	}
	var ma, mb mat.Dense
	ma.Mul(f.Modes, f.Inverse)
	mb.Scale(-1, f.Control)
	if d := relDiff(&ma, &mb); d > 1e-9 {
		t.Errorf("filtered Modes·Inverse differs from −Control by %g", d)
	}
}
