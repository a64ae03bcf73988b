package centroid

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/stat"
	"gonum.org/v1/gonum/stat/distuv"

	"stillsky/sim/detector"
)

// grid is a 4×4 grid with the four corners invalid, in raster order.
var grid = []int{1, 2, 4, 5, 6, 7, 8, 9, 10, 11, 13, 14}

func detCfg() detector.Config {
	return detector.Config{Subapertures: 4, Valid: grid, Pixels: 8, Sigma: 1.2, Photons: 2000,
		Gain: 1, FullWell: 60000, Bias: 100}
}

func layout() Layout { return Layout{Subapertures: 4, Pixels: 8, Valid: grid} }

func mustDet(t testing.TB, c detector.Config) *detector.Detector {
	t.Helper()
	d, err := detector.New(c)
	if err != nil {
		t.Fatal(err)
	}
	return d
}

func mustCal(t testing.TB, o Options) *Calibration {
	t.Helper()
	c, err := NewCalibration(layout(), o)
	if err != nil {
		t.Fatal(err)
	}
	return c
}

func biasFrame(v float32) []float32 {
	d := make([]float32, 32*32)
	for i := range d {
		d[i] = v
	}
	return d
}

// A noise-free spot's centre of gravity gives back its offset. The only error
// left is the truncation of the Gaussian's wings by the 8-pixel window, well
// below 0.01 pixel for σ = 1.2 and offsets within ±0.5 pixel.
func TestNoiseFreeOffsets(t *testing.T) {
	d := mustDet(t, detCfg())
	c := mustCal(t, Options{Dark: biasFrame(100)})
	n := len(grid)
	off := make([]float64, 2*n)
	for i := range n {
		off[i] = -0.5 + float64(i)/float64(n)
		off[n+i] = 0.4 - 0.06*float64(i)
	}
	frame := make([]uint16, d.Side()*d.Side())
	if err := d.Render(frame, off, rand.New(rand.NewPCG(1, 2))); err != nil {
		t.Fatal(err)
	}
	got := make([]float32, 2*n)
	if _, err := c.Process(frame, got, make([]float32, 64)); err != nil {
		t.Fatal(err)
	}
	for i := range got {
		// Rounding to whole ADU adds at most 0.5 ADU per pixel on 2000 e⁻.
		if math.Abs(float64(got[i])-off[i]) > 0.01 {
			t.Errorf("slope %d = %.4f, want %.4f", i, got[i], off[i])
		}
	}
}

// An elongated spot is the Gaussian convolved with a uniform line of length
// L: its variance along the line is σ² + L²/12 (the variance of a uniform
// distribution of width L, added by the convolution), across it σ², and its
// centre does not move.
func TestElongationMoments(t *testing.T) {
	cfg := detCfg()
	cfg.Pixels, cfg.Sigma, cfg.Subapertures, cfg.Valid = 32, 1, 1, []int{0}
	d := mustDet(t, cfg)
	L, ang := 6.0, 0.7
	if err := d.SetElongation([]detector.Elongation{{Length: L, Angle: ang}}); err != nil {
		t.Fatal(err)
	}
	frame := make([]uint16, 32*32)
	cfg.Photons = 1e6
	if err := d.Render(frame, []float64{0, 0}, rand.New(rand.NewPCG(1, 2))); err != nil {
		t.Fatal(err)
	}
	var s, su, sv, suu, svv float64
	ux, uy := math.Cos(ang), math.Sin(ang)
	for y := range 32 {
		for x := range 32 {
			w := float64(frame[y*32+x]) - 100
			dx, dy := float64(x)-15.5, float64(y)-15.5
			u, v := dx*ux+dy*uy, -dx*uy+dy*ux
			s += w
			su += w * u
			sv += w * v
			suu += w * u * u
			svv += w * v * v
		}
	}
	// The pixel's own width adds 1/12 pixel² on each axis.
	wantU, wantV := 1+L*L/12+1.0/12, 1+1.0/12
	if math.Abs(su/s) > 0.01 || math.Abs(sv/s) > 0.01 {
		t.Errorf("centre (%.3f, %.3f), want (0, 0)", su/s, sv/s)
	}
	if gu := suu / s; math.Abs(gu-wantU)/wantU > 0.02 {
		t.Errorf("variance along the elongation %.3f, want %.3f", gu, wantU)
	}
	if gv := svv / s; math.Abs(gv-wantV)/wantV > 0.03 {
		t.Errorf("variance across %.3f, want %.3f", gv, wantV)
	}
	if err := d.SetElongation([]detector.Elongation{{Length: -1}}); !errors.Is(err, detector.ErrConfig) {
		t.Errorf("negative length: %v, want ErrConfig", err)
	}
}

// Centroid noise against the published formulas and against a Monte-Carlo of
// the same spots that does not use the renderer.
//
// Rousset's expressions (Rousset 1999, "Wave-front sensors", in Roddier (ed.),
// Adaptive Optics in Astronomy, ch. 5; *from memory*), for the phase difference
// across a subaperture φ = 2π·x/N_D with x the spot shift in pixels and N_D the
// diffraction FWHM λ/d in pixels:
//
//	photon noise:  σ²_φ = (π²/(2 ln 2)) · (1/N_ph) · (N_T/N_D)²  (Gaussian spot of FWHM N_T pixels;
//	               the ln 2 form for a Gaussian as in Thomas et al. 2006, MNRAS 371, 323, from memory)
//	read noise:    σ²_φ = (π²/3) · (σ_e²/N_ph²) · (N_S²/N_D)²    (N_S² pixels in the centre of gravity)
//
// In pixels these are σ²_x = N_T²/(8 ln 2 · N_ph) = σ²/N_ph and
// σ²_x = σ_e² N_S⁴ / (12 N_ph²); N_D cancels. Both ignore the pixel's own
// width, which adds 1/(12 N_ph) to the photon term: 5.8% for σ = 1.2 pixels,
// inside the 10% target, and the Monte-Carlo bins its photons so has it too.
func TestCentroidNoise(t *testing.T) {
	const (
		nsub  = 1
		pix   = 8
		sigma = 1.2
	)
	n := 3000
	if testing.Short() {
		n = 1200
	}
	cases := []struct {
		name             string
		photons, readout float64
		photonNoise      bool
		formula          float64
	}{
		{"photon-limited", 400, 0, true, sigma * sigma / 400},
		{"read-noise-limited", 400, 5, false, 25 * math.Pow(pix, 4) / (12 * 400 * 400)},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			cfg := detector.Config{Subapertures: nsub, Valid: []int{0}, Pixels: pix, Sigma: sigma,
				Photons: tc.photons, ReadNoise: tc.readout, PhotonNoise: tc.photonNoise,
				Bias: 1000, Gain: 0.05, FullWell: 1e6}
			d := mustDet(t, cfg)
			l := Layout{Subapertures: nsub, Pixels: pix, Valid: []int{0}}
			dark := make([]float32, pix*pix)
			for i := range dark {
				dark[i] = 1000
			}
			// Gain 0.05 e⁻/ADU makes the ADU rounding negligible. The
			// centre of gravity does not depend on a uniform gain, so no
			// flat is needed to turn ADU back into electrons.
			c, err := NewCalibration(l, Options{Dark: dark})
			if err != nil {
				t.Fatal(err)
			}
			rng := rand.New(rand.NewPCG(7, 11))
			frame := make([]uint16, pix*pix)
			s := make([]float32, 2)
			work := make([]float32, pix*pix)
			xs := make([]float64, 0, 2*n)
			for range n {
				if err := d.Render(frame, []float64{0, 0}, rng); err != nil {
					t.Fatal(err)
				}
				if _, err := c.Process(frame, s, work); err != nil {
					t.Fatal(err)
				}
				xs = append(xs, float64(s[0]), float64(s[1]))
			}
			got := stat.Variance(xs, nil)
			mc := monteCarlo(tc.photons, tc.readout, tc.photonNoise, sigma, pix, n, rng)
			t.Logf("%s: rendered %.3g px², independent Monte-Carlo %.3g px², Rousset %.3g px²", tc.name, got, mc, tc.formula)
			// The 2·n draws of the variance have a relative standard error
			// of about √(1/n) (3% at n = 1200), inside the 10% target.
			if r := got / tc.formula; r < 0.9 || r > 1.1 {
				t.Errorf("variance %.4g, Rousset %.4g: ratio %.3f, want within 10%%", got, tc.formula, r)
			}
			if r := got / mc; r < 0.9 || r > 1.1 {
				t.Errorf("variance %.4g, Monte-Carlo %.4g: ratio %.3f, want within 10%%", got, mc, r)
			}
		})
	}
}

// monteCarlo draws the same spot photon by photon (gonum's Poisson count,
// Gaussian positions binned into pixels) and read noise per pixel, then takes
// the plain centre of gravity: no code shared with the renderer or Process.
func monteCarlo(photons, readout float64, photonNoise bool, sigma float64, pix, n int, rng *rand.Rand) float64 {
	img := make([]float64, pix*pix)
	ctr := float64(pix-1) / 2
	pois := distuv.Poisson{Lambda: photons, Src: rng}
	xs := make([]float64, 0, 2*n)
	for range n {
		clear(img)
		if photonNoise {
			k := int(pois.Rand())
			for range k {
				x := math.Round(ctr + sigma*rng.NormFloat64())
				y := math.Round(ctr + sigma*rng.NormFloat64())
				if x >= 0 && y >= 0 && x < float64(pix) && y < float64(pix) {
					img[int(y)*pix+int(x)]++
				}
			}
		} else {
			// Expected photons per pixel, by a fine numerical integration.
			for y := range pix {
				for x := range pix {
					img[y*pix+x] = photons * bin(float64(x)-ctr, sigma) * bin(float64(y)-ctr, sigma)
				}
			}
		}
		var s, sx, sy float64
		for y := range pix {
			for x := range pix {
				v := img[y*pix+x] + readout*rng.NormFloat64()
				s += v
				sx += v * (float64(x) - ctr)
				sy += v * (float64(y) - ctr)
			}
		}
		xs = append(xs, sx/s, sy/s)
	}
	return stat.Variance(xs, nil)
}

// bin integrates a unit Gaussian over the pixel centred at c by the midpoint
// rule on 200 steps.
func bin(c, sigma float64) float64 {
	g := distuv.Normal{Mu: 0, Sigma: sigma}
	var s float64
	for i := range 200 {
		s += g.Prob(c - 0.5 + (float64(i)+0.5)/200)
	}
	return s / 200
}

// Dark, flat and background: with a 10% flat pattern, dark current and
// background, a calibration made from captured frames (the mean of dark
// frames; the flat from uniform illumination) gives back the offsets, and
// ignoring the flat does not.
func TestCalibrationFrames(t *testing.T) {
	cfg := detCfg()
	cfg.FlatRMS, cfg.FlatSeed, cfg.Dark, cfg.Background = 0.1, 3, 40, 30
	d := mustDet(t, cfg)
	side := d.Side()
	rng := rand.New(rand.NewPCG(5, 6))
	n := len(grid)
	off := make([]float64, 2*n)
	for i := range off {
		off[i] = 0.3 * math.Sin(float64(i))
	}
	// Dark: mean of frames with the star off (background and dark current on).
	dk := cfg
	dk.Photons = 0
	ddet := mustDet(t, dk)
	frame := make([]uint16, side*side)
	dark := make([]float32, side*side)
	for range 16 {
		if err := ddet.Render(frame, make([]float64, 2*n), rng); err != nil {
			t.Fatal(err)
		}
		for i, v := range frame {
			dark[i] += float32(v) / 16
		}
	}
	flat := make([]float32, side*side)
	for i, f := range d.Flat() {
		flat[i] = float32(f)
	}
	if err := d.Render(frame, off, rng); err != nil {
		t.Fatal(err)
	}
	got := make([]float32, 2*n)
	work := make([]float32, 64)
	worst := func(o Options) float64 {
		c := mustCal(t, o)
		if _, err := c.Process(frame, got, work); err != nil {
			t.Fatal(err)
		}
		w := 0.0
		for i := range got {
			w = math.Max(w, math.Abs(float64(got[i])-off[i]))
		}
		return w
	}
	with, without := worst(Options{Dark: dark, Flat: flat}), worst(Options{Dark: dark})
	t.Logf("worst slope error: %.4f px calibrated, %.4f px without the flat", with, without)
	if with > 0.02 {
		t.Errorf("calibrated worst error %.4f px, want <= 0.02", with)
	}
	if without < 2*with {
		t.Errorf("without the flat %.4f px, want clearly worse than %.4f", without, with)
	}
}

// Reference slopes are subtracted; the weighted centre of gravity keeps the
// sign and a response near one for a small shift of a spot narrower than its
// weight.
func TestReferenceAndWCoG(t *testing.T) {
	d := mustDet(t, detCfg())
	n := len(grid)
	off := make([]float64, 2*n)
	for i := range off {
		off[i] = 0.2
	}
	frame := make([]uint16, d.Side()*d.Side())
	if err := d.Render(frame, off, rand.New(rand.NewPCG(1, 1))); err != nil {
		t.Fatal(err)
	}
	ref := make([]float64, 2*n)
	for i := range ref {
		ref[i] = 0.05
	}
	got := make([]float32, 2*n)
	work := make([]float32, 64)
	c := mustCal(t, Options{Dark: biasFrame(100), Reference: ref})
	if _, err := c.Process(frame, got, work); err != nil {
		t.Fatal(err)
	}
	for i := range got {
		if math.Abs(float64(got[i])-0.15) > 0.01 {
			t.Fatalf("slope %d = %.4f, want 0.15 (0.2 less the 0.05 reference)", i, got[i])
		}
	}
	w := mustCal(t, Options{Dark: biasFrame(100), Method: WCoG, WeightSigma: 3})
	if _, err := w.Process(frame, got, work); err != nil {
		t.Fatal(err)
	}
	// A Gaussian spot σ under a Gaussian weight σ_w is a Gaussian of variance
	// σ²σ_w²/(σ²+σ_w²) centred at x·σ_w²/(σ²+σ_w²): the response is
	// σ_w²/(σ²+σ_w²) = 9/10.44 (product of Gaussians).
	want := 0.2 * 9 / (9 + 1.44)
	for i := range got {
		if math.Abs(float64(got[i])-want) > 0.01 {
			t.Fatalf("WCoG slope %d = %.4f, want %.4f", i, got[i], want)
		}
	}
}

// Row chunks give the same slopes as the whole frame.
func TestProcessRowsMatchesFrame(t *testing.T) {
	d := mustDet(t, detCfg())
	c := mustCal(t, Options{Dark: biasFrame(100), Threshold: 0.05})
	n := len(grid)
	off := make([]float64, 2*n)
	for i := range off {
		off[i] = 0.1 * float64(i%5)
	}
	frame := make([]uint16, 32*32)
	if err := d.Render(frame, off, rand.New(rand.NewPCG(9, 9))); err != nil {
		t.Fatal(err)
	}
	whole, chunked := make([]float32, 2*n), make([]float32, 2*n)
	work := make([]float32, 64)
	if _, err := c.Process(frame, whole, work); err != nil {
		t.Fatal(err)
	}
	for r := 0; r < 32; r += 8 {
		if _, err := c.ProcessRows(frame[r*32:(r+8)*32], r, r+8, chunked, work); err != nil {
			t.Fatal(err)
		}
		if got, want := c.RowsReady(r+8), []int{2, 6, 10, 12}[r/8]; got != want {
			t.Errorf("RowsReady(%d) = %d, want %d", r+8, got, want)
		}
	}
	for i := range whole {
		if whole[i] != chunked[i] {
			t.Fatalf("slope %d: chunked %v, whole %v", i, chunked[i], whole[i])
		}
	}
}

// Bad frames are refused with ErrLength; a saturated spot and a dead
// (unlit) window are counted in Flags.
func TestBadFrames(t *testing.T) {
	c := mustCal(t, Options{Dark: biasFrame(100), Saturation: 60000})
	s, w := make([]float32, 2*len(grid)), make([]float32, 64)
	for _, tc := range []struct {
		name       string
		frame      []uint16
		from, to   int
		wholeFrame bool
	}{
		{"short frame", make([]uint16, 32*32-1), 0, 32, true},
		{"long frame", make([]uint16, 32*33), 0, 32, true},
		{"chunk off a window boundary", make([]uint16, 4*32), 0, 4, false},
		{"chunk rows beyond the frame", make([]uint16, 8*32), 32, 40, false},
		{"chunk length against its rows", make([]uint16, 7*32), 0, 8, false},
	} {
		t.Run(tc.name, func(t *testing.T) {
			var err error
			if tc.wholeFrame {
				_, err = c.Process(tc.frame, s, w)
			} else {
				_, err = c.ProcessRows(tc.frame, tc.from, tc.to, s, w)
			}
			if !errors.Is(err, ErrLength) {
				t.Errorf("err = %v, want ErrLength", err)
			}
		})
	}
	cfg := detCfg()
	cfg.Photons = 1e6 // far above full well in the brightest pixels
	cfg.FullWell = 59900
	d := mustDet(t, cfg)
	frame := make([]uint16, 32*32)
	if err := d.Render(frame, make([]float64, 2*len(grid)), rand.New(rand.NewPCG(1, 1))); err != nil {
		t.Fatal(err)
	}
	// A dead window: subaperture 1's rows read the bias only.
	for y := 0; y < 8; y++ {
		for x := 8; x < 16; x++ {
			frame[y*32+x] = 100
		}
	}
	f, err := c.Process(frame, s, w)
	if err != nil {
		t.Fatal(err)
	}
	if f.Saturated != len(grid)-1 || f.Dark != 1 || f.DeadRows != 0 || f.Hot != 0 {
		t.Errorf("flags %+v, want %d saturated and 1 dark", f, len(grid)-1)
	}

	// A hot pixel and a dead readout line on an ordinary frame.
	h := mustCal(t, Options{Dark: biasFrame(100), HotRatio: 4})
	d = mustDet(t, detCfg())
	if err := d.Render(frame, make([]float64, 2*len(grid)), rand.New(rand.NewPCG(1, 1))); err != nil {
		t.Fatal(err)
	}
	if f, err := h.Process(frame, s, w); err != nil || f != (Flags{}) {
		t.Fatalf("clean frame: flags %+v, err %v; want none", f, err)
	}
	frame[1*32+9] = 30000 // subaperture 1 (row 0, column 1), a corner pixel
	for x := range 32 {
		frame[20*32+x] = 0 // detector row 20 crosses grid row 2: four windows
	}
	f, err = h.Process(frame, s, w)
	if err != nil {
		t.Fatal(err)
	}
	if f.Hot != 1 || f.DeadRows != 4 {
		t.Errorf("flags %+v, want 1 hot window and 4 dead window rows", f)
	}
}

// Render and Process allocate nothing per frame.
func TestFrameAllocatesNothing(t *testing.T) {
	cfg := detCfg()
	cfg.PhotonNoise, cfg.ReadNoise, cfg.FlatRMS = true, 3, 0.05
	d := mustDet(t, cfg)
	if err := d.SetElongation(make([]detector.Elongation, len(grid))); err != nil {
		t.Fatal(err)
	}
	c := mustCal(t, Options{Dark: biasFrame(100), Method: WCoG, WeightSigma: 2, Threshold: 0.1, HotRatio: 4})
	frame := make([]uint16, 32*32)
	off, s, w := make([]float64, 2*len(grid)), make([]float32, 2*len(grid)), make([]float32, 64)
	rng := rand.New(rand.NewPCG(1, 1))
	if a := testing.AllocsPerRun(50, func() {
		if err := d.Render(frame, off, rng); err != nil {
			t.Fatal(err)
		}
	}); a != 0 {
		t.Errorf("Render: %v allocations per frame, want 0", a)
	}
	if a := testing.AllocsPerRun(50, func() {
		if _, err := c.Process(frame, s, w); err != nil {
			t.Fatal(err)
		}
		if _, err := c.ProcessRows(frame[:8*32], 0, 8, s, w); err != nil {
			t.Fatal(err)
		}
	}); a != 0 {
		t.Errorf("Process: %v allocations per frame, want 0", a)
	}
}

func BenchmarkProcess(b *testing.B) {
	// 40×40 grid of 8×8 windows, 1240 valid, about the large scenario's size.
	var valid []int
	for r := range 40 {
		for c := range 40 {
			x, y := float64(c)-19.5, float64(r)-19.5
			if rr := math.Hypot(x, y); rr < 20 && rr > 5 {
				valid = append(valid, r*40+c)
			}
		}
	}
	l := Layout{Subapertures: 40, Pixels: 8, Valid: valid}
	c, err := NewCalibration(l, Options{Threshold: 0.05})
	if err != nil {
		b.Fatal(err)
	}
	frame := make([]uint16, 320*320)
	for i := range frame {
		frame[i] = uint16(100 + i%37)
	}
	s, w := make([]float32, 2*len(valid)), make([]float32, 64)
	b.ResetTimer()
	for range b.N {
		if _, err := c.Process(frame, s, w); err != nil {
			b.Fatal(err)
		}
	}
}

// TestHotFloor: with HotFloor the hot-pixel test compares the peak against
// the floor where the neighbours hold only noise about zero. A lone pixel of
// 20 ADU in an otherwise dark window (a photo-electron or two of a faint star)
// is hot for a bare ratio of 16 but not above a floor of 40 ADU (16 × 40 =
// 640); a lone 3000 ADU pixel (a cosmic-ray hit) is hot either way. Every
// kernel the CPU offers gives the same count.
func TestHotFloor(t *testing.T) {
	frame := make([]uint16, 32*32)
	for i := range frame {
		frame[i] = 100
	}
	// valid[0] = subaperture 1 (grid row 0, column 1); valid[5] = 7 (row 1, column 3).
	frame[3*32+8+4] += 20
	frame[(8+2)*32+24+5] += 3000
	s, w := make([]float32, 2*len(grid)), make([]float32, 64)
	for _, k := range Available(8) {
		for _, tc := range []struct {
			floor float64
			hot   int
		}{{0, 2}, {40, 1}, {200, 0}} {
			t.Run(fmt.Sprintf("%s/floor%g", k, tc.floor), func(t *testing.T) {
				c := mustCal(t, Options{Dark: biasFrame(100), HotRatio: 16, HotFloor: tc.floor, Kernel: k})
				f, err := c.Process(frame, s, w)
				if err != nil {
					t.Fatal(err)
				}
				if f.Hot != tc.hot {
					t.Errorf("%d hot windows, want %d (flags %+v)", f.Hot, tc.hot, f)
				}
			})
		}
	}
	for _, bad := range []float64{-1, math.NaN(), math.Inf(1), 70000} {
		if _, err := NewCalibration(layout(), Options{HotRatio: 16, HotFloor: bad}); !errors.Is(err, ErrConfig) {
			t.Errorf("HotFloor %v: err %v, want ErrConfig", bad, err)
		}
	}
}
