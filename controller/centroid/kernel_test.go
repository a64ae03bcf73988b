package centroid

import (
	"errors"
	"fmt"
	"math"
	"math/big"
	"math/rand/v2"
	"slices"
	"testing"
	"unsafe"

	"stillsky/sim/detector"
)

// refProcess is the centroid arithmetic as it stood before the kernels (the
// code that TestCentroidNoise first checked against Rousset's formulas):
// calibrate the whole window into work from the full-frame dark and flat,
// then sum rows of v·x and v·y. It is kept here as the independent
// reference of every kernel; its sums run in another order, so it agrees
// with them to rounding, not bit for bit.
func refProcess(l Layout, o Options, frame []uint16, slopes []float32) Flags {
	side, p := l.Side(), l.Pixels
	sat := o.Saturation
	if sat == 0 {
		sat = 65535
	}
	ctr := float64(p-1) / 2
	xs := make([]float32, p)
	for x := range xs {
		xs[x] = float32(float64(x) - ctr)
	}
	weight := make([]float32, p*p)
	for y := range p {
		for x := range p {
			weight[y*p+x] = 1
			if o.Method == WCoG {
				r2 := float64(xs[x])*float64(xs[x]) + float64(xs[y])*float64(xs[y])
				weight[y*p+x] = float32(math.Exp(-r2 / (2 * o.WeightSigma * o.WeightSigma)))
			}
		}
	}
	work := make([]float32, p*p)
	var f Flags
	for i, v := range l.Valid {
		st := (v/l.Subapertures)*p*side + (v%l.Subapertures)*p
		peak, pk := float32(0), 0
		var top uint16
		for y := range p {
			var rowTop uint16
			for x := range p {
				k := st + y*side + x
				a := frame[k]
				rowTop = max(rowTop, a)
				g, d := float32(1), float32(0)
				if o.Flat != nil {
					g = 1 / o.Flat[k]
				}
				if o.Dark != nil {
					d = o.Dark[k]
				}
				v := float32(float32(a)*g) - float32(d*g)
				work[y*p+x] = v
				if v > peak {
					peak, pk = v, y*p+x
				}
			}
			if rowTop == 0 {
				f.DeadRows++
			}
			top = max(top, rowTop)
		}
		if top >= sat {
			f.Saturated++
		}
		if o.HotRatio > 0 && peak > 0 {
			x, y := pk%p, pk/p
			n := float32(0)
			if x > 0 {
				n = max(n, work[pk-1])
			}
			if x < p-1 {
				n = max(n, work[pk+1])
			}
			if y > 0 {
				n = max(n, work[pk-p])
			}
			if y < p-1 {
				n = max(n, work[pk+p])
			}
			if peak > float32(o.HotRatio)*n {
				f.Hot++
			}
		}
		thr := float32(o.Threshold) * peak
		var s, sx, sy float32
		for y := range p {
			var rs, rx float32
			for x := range p {
				v := work[y*p+x]
				if thr > 0 {
					v = max(v-thr, 0)
				}
				v *= weight[y*p+x]
				rs += v
				rx += float32(v * xs[x])
			}
			s += rs
			sx += rx
			sy += float32(rs * xs[y])
		}
		if s <= 0 {
			f.Dark++
			slopes[2*i], slopes[2*i+1] = 0, 0
			continue
		}
		var rx, ry float32
		if o.Reference != nil {
			rx, ry = float32(o.Reference[2*i]), float32(o.Reference[2*i+1])
		}
		slopes[2*i] = sx/s - rx
		slopes[2*i+1] = sy/s - ry
	}
	return f
}

// kernelCase is one configuration and frame of the kernel tests.
type kernelCase struct {
	name  string
	l     Layout
	o     Options
	frame []uint16
	// faults: the frame has the planted faults; unlit: and its unlit
	// window is at this calibration's dark level.
	faults, unlit bool
}

// kernelCases renders frames with a flat-field pattern, photon and read
// noise and random spot offsets on a 6×6 grid (corners invalid, slope order
// not raster order so that ProcessRows must find each row's windows), then
// plants the faults the flags count: a hot pixel, a dead readout line, a
// saturated spot, an unlit window. Each method, threshold and option runs on
// the same frames.
func kernelCases(t testing.TB, pixels int) []kernelCase {
	const n = 6
	rng := rand.New(rand.NewPCG(uint64(pixels), 7))
	var valid []int
	for r := range n {
		for c := range n {
			if (r == 0 || r == n-1) && (c == 0 || c == n-1) {
				continue
			}
			valid = append(valid, r*n+c)
		}
	}
	rng.Shuffle(len(valid), func(i, j int) { valid[i], valid[j] = valid[j], valid[i] })
	l := Layout{Subapertures: n, Pixels: pixels, Valid: valid}
	side := l.Side()
	det := mustDet(t, detector.Config{Subapertures: n, Valid: valid, Pixels: pixels, Sigma: 0.3 * float64(pixels) / 2,
		Photons: 3000, Background: 15, Dark: 5, ReadNoise: 3, Bias: 100, Gain: 1, FullWell: 60000,
		FlatRMS: 0.05, FlatSeed: 3, PhotonNoise: true})
	dark := make([]float32, side*side)
	flat := make([]float32, side*side)
	for i := range dark {
		dark[i] = 120 + float32(rng.Float64())
		flat[i] = float32(det.Flat()[i])
	}
	ref := make([]float64, 2*len(valid))
	for i := range ref {
		ref[i] = 0.2 * (rng.Float64() - 0.5)
	}
	// A calibration at the edges of what NewCalibration takes: darks from 0
	// through tiny (below 1/4096 ADU, which count as 0) to thousands of ADU,
	// flats across (0.05, 20).
	wildDark, wildFlat := make([]float32, side*side), make([]float32, side*side)
	for i := range wildDark {
		switch i % 4 {
		case 0:
			wildDark[i] = 0
		case 1:
			wildDark[i] = float32(math.Pow(10, -8+5*rng.Float64()))
		default:
			wildDark[i] = float32(math.Pow(10, -3+7*rng.Float64())) * 65535 / 1e4
		}
		wildFlat[i] = float32(math.Exp(math.Log(0.06) + rng.Float64()*(math.Log(19)-math.Log(0.06))))
	}
	var frames [][]uint16
	for range 3 {
		off := make([]float64, 2*len(valid))
		for i := range off {
			off[i] = float64(pixels) / 8 * (rng.Float64() - 0.5)
		}
		fr := make([]uint16, side*side)
		if err := det.Render(fr, off, rng); err != nil {
			t.Fatal(err)
		}
		frames = append(frames, fr)
	}
	// Faults on the last frame: a hot pixel in the window of valid[0], a
	// dead detector row through grid row 2, a saturated window (valid[1]) and
	// an unlit one (valid[2], at the dark level).
	fr := frames[2]
	at := func(v, x, y int) int { return (v/n*pixels+y)*side + v%n*pixels + x }
	fr[at(valid[0], pixels-1, 1)] = 40000
	for x := range side {
		fr[(2*pixels+1)*side+x] = 0
	}
	for y := range pixels {
		for x := range pixels {
			fr[at(valid[1], x, y)] = 65535
			fr[at(valid[2], x, y)] = uint16(dark[at(valid[2], x, y)])
		}
	}
	var cases []kernelCase
	for fi, fr := range frames {
		for _, o := range []Options{
			{Dark: dark, Flat: flat},
			{Dark: dark, Flat: flat, Threshold: 0.1, HotRatio: 4},
			{Dark: dark, Threshold: 0.05, Reference: ref, Saturation: 50000},
			{Flat: flat, Method: WCoG, WeightSigma: float64(pixels) / 4, HotRatio: 3},
			{Dark: dark, Flat: flat, Method: WCoG, WeightSigma: 2, Threshold: 0.2, Reference: ref},
			{Dark: wildDark, Flat: wildFlat, Threshold: 0.05},
			{},
		} {
			cases = append(cases, kernelCase{fmt.Sprintf("frame%d/%s-thr%g-hot%g-flat%v-ref%v", fi,
				[]string{"cog", "wcog"}[o.Method], o.Threshold, o.HotRatio, o.Flat != nil, o.Reference != nil), l, o, fr,
				fi == 2, fi == 2 && o.Dark != nil && &o.Dark[0] == &dark[0]})
		}
	}
	return cases
}

// Every kernel gives the reference's slopes to rounding and its flags
// exactly, on whole frames and on row chunks, for the assembly's window size
// and for others (pure Go only).
func TestKernelsMatchReference(t *testing.T) {
	for _, pixels := range []int{8, 5, 16} {
		for _, k := range Available(pixels) {
			for _, tc := range kernelCases(t, pixels) {
				t.Run(fmt.Sprintf("%dpx/%s/%s", pixels, k, tc.name), func(t *testing.T) {
					o := tc.o
					o.Kernel = k
					c, err := NewCalibration(tc.l, o)
					if err != nil {
						t.Fatal(err)
					}
					if c.Kernel() != k {
						t.Fatalf("Kernel() = %q, want %q", c.Kernel(), k)
					}
					nv := len(tc.l.Valid)
					want := make([]float32, 2*nv)
					wf := refProcess(tc.l, tc.o, tc.frame, want)
					got := make([]float32, 2*nv)
					work := make([]float32, pixels*pixels)
					f, err := c.Process(tc.frame, got, work)
					if err != nil {
						t.Fatal(err)
					}
					if f != wf {
						t.Errorf("flags %+v, reference %+v", f, wf)
					}
					if tc.faults && (wf.Hot == 0 && tc.o.HotRatio > 0 || wf.DeadRows == 0 || wf.Saturated == 0 || wf.Dark == 0 && tc.unlit) {
						t.Errorf("reference flags %+v: a planted fault went unseen", wf)
					}
					// Two float32 sums of the same 64 terms in different
					// orders differ by at most about 2·n·u of the sum of
					// magnitudes (Higham 2002, Accuracy and Stability of
					// Numerical Algorithms, eq. (3.5), from memory); with
					// terms of one sign after a threshold, and the window's
					// |x| <= Pixels/2, 1e-4 pixel is far above that and far
					// below any centroiding error that matters.
					for i := range want {
						if d := math.Abs(float64(got[i] - want[i])); d > 1e-4 || math.IsNaN(float64(got[i])) {
							t.Fatalf("slope %d: %v, reference %v", i, got[i], want[i])
						}
					}
					// Row chunks of one grid row at a time give the same bits
					// and, summed, the same flags.
					chunked := make([]float32, 2*nv)
					var sum Flags
					side := tc.l.Side()
					for r := 0; r < side; r += pixels {
						cf, err := c.ProcessRows(tc.frame[r*side:(r+pixels)*side], r, r+pixels, chunked, work)
						if err != nil {
							t.Fatal(err)
						}
						sum.Saturated += cf.Saturated
						sum.Dark += cf.Dark
						sum.DeadRows += cf.DeadRows
						sum.Hot += cf.Hot
					}
					if sum != f || !slices.Equal(chunked, got) {
						t.Errorf("row chunks: flags %+v, slopes equal %v; whole frame %+v", sum, slices.Equal(chunked, got), f)
					}
				})
			}
		}
	}
}

// The assembly and the pure-Go kernel agree bit for bit: both follow the
// order of operations that kernel.go sets down.
func TestKernelsAgreeBitForBit(t *testing.T) {
	ks := Available(8)
	if len(ks) < 2 {
		t.Skipf("only %v on this CPU and build: nothing to compare the plain kernel with", ks)
	}
	for _, k := range ks[:len(ks)-1] {
		for _, tc := range kernelCases(t, 8) {
			t.Run(k+"/"+tc.name, func(t *testing.T) {
				run := func(name string) ([]float32, Flags) {
					o := tc.o
					o.Kernel = name
					c, err := NewCalibration(tc.l, o)
					if err != nil {
						t.Fatal(err)
					}
					s := make([]float32, 2*len(tc.l.Valid))
					f, err := c.Process(tc.frame, s, make([]float32, 64))
					if err != nil {
						t.Fatal(err)
					}
					return s, f
				}
				gs, gf := run(k)
				ps, pf := run("plain")
				if gf != pf {
					t.Errorf("flags %+v, plain %+v", gf, pf)
				}
				for i := range gs {
					if math.Float32bits(gs[i]) != math.Float32bits(ps[i]) {
						t.Fatalf("slope %d: %v (%#x), plain %v (%#x)", i, gs[i], math.Float32bits(gs[i]), ps[i], math.Float32bits(ps[i]))
					}
				}
			})
		}
	}
}

// The generic pure-Go loop and its 8×8 form give the same bits.
func TestGoLoopsAgree(t *testing.T) {
	for _, tc := range kernelCases(t, 8) {
		t.Run(tc.name, func(t *testing.T) {
			o := tc.o
			o.Kernel = "plain"
			c, err := NewCalibration(tc.l, o)
			if err != nil {
				t.Fatal(err)
			}
			idx := c.byRow
			s8, sg := make([]float32, 2*len(idx)), make([]float32, 2*len(idx))
			var f8, fg Flags
			windowsGo8(c, tc.frame, 0, idx, s8, make([]float32, 64), &f8)
			windowsGo(c, tc.frame, 0, idx, sg, make([]float32, 64), &fg)
			if f8 != fg {
				t.Errorf("flags %+v, generic %+v", f8, fg)
			}
			for i := range s8 {
				if math.Float32bits(s8[i]) != math.Float32bits(sg[i]) {
					t.Fatalf("slope %d: %v, generic %v", i, s8[i], sg[i])
				}
			}
		})
	}
}

// The pure-Go kernels calibrate as float32(float64(raw)·float64(gain) −
// float64(offset)); that is the exact value rounded once, as the assembly's
// fused multiply–subtract gives it, only if the float64 arithmetic is exact.
// Checked against math/big (exact at 256 bits, then rounded to nearest
// float32) over the whole range NewCalibration takes, offsets below
// gain/4096 flushed to 0 as it does.
func TestCalibrationRoundsOnce(t *testing.T) {
	rng := rand.New(rand.NewPCG(4, 4))
	for n := range 200000 {
		a := float32(rng.IntN(65536))
		g := float32(1 / math.Exp(math.Log(0.05)+rng.Float64()*(math.Log(20)-math.Log(0.05))))
		var dark float32
		switch n % 3 {
		case 0:
			dark = float32(rng.Float64() * 65535)
		case 1:
			dark = float32(math.Pow(10, -12+16*rng.Float64()))
		}
		off := dark * g
		if off < g/4096 {
			off = 0
		}
		got := float32(float64(a)*float64(g) - float64(off))
		ex := new(big.Float).SetPrec(256).SetFloat64(float64(a))
		ex.Mul(ex, new(big.Float).SetPrec(256).SetFloat64(float64(g)))
		ex.Sub(ex, new(big.Float).SetPrec(256).SetFloat64(float64(off)))
		want, _ := ex.Float32()
		if math.Float32bits(got) != math.Float32bits(want) && !(got == 0 && want == 0) {
			t.Fatalf("raw %v, gain %v, offset %v: float64 route %v, exact rounding %v", a, g, off, got, want)
		}
	}
}

// Each kernel allocates nothing per frame or chunk.
func TestKernelsAllocateNothing(t *testing.T) {
	tc := kernelCases(t, 8)[7] // threshold and hot-pixel test on
	for _, k := range Available(8) {
		o := tc.o
		o.Kernel = k
		c, err := NewCalibration(tc.l, o)
		if err != nil {
			t.Fatal(err)
		}
		s, w := make([]float32, 2*len(tc.l.Valid)), make([]float32, 64)
		if a := testing.AllocsPerRun(50, func() {
			if _, err := c.Process(tc.frame, s, w); err != nil {
				t.Fatal(err)
			}
			if _, err := c.ProcessRows(tc.frame[8*48:16*48], 8, 16, s, w); err != nil {
				t.Fatal(err)
			}
		}); a != 0 {
			t.Errorf("%s: %v allocations per frame, want 0", k, a)
		}
	}
}

func TestKernelChoice(t *testing.T) {
	l := layout()
	if got := Available(8); got[len(got)-1] != "plain" {
		t.Errorf("Available(8) = %v, want plain last", got)
	}
	if got := Available(6); !slices.Equal(got, []string{"plain"}) {
		t.Errorf("Available(6) = %v, want only plain (the assembly takes 8×8 windows)", got)
	}
	c, err := NewCalibration(l, Options{})
	if err != nil {
		t.Fatal(err)
	}
	if c.Kernel() != Available(8)[0] {
		t.Errorf("default kernel %q, want the fastest, %q", c.Kernel(), Available(8)[0])
	}
	for _, tc := range []struct {
		name, kernel string
		pixels       int
	}{
		{"unknown kernel", "sse9", 8},
		{"assembly on a 6-pixel window", "avx2", 6},
	} {
		t.Run(tc.name, func(t *testing.T) {
			l := Layout{Subapertures: 2, Pixels: tc.pixels, Valid: []int{0, 1, 2, 3}}
			_, err := NewCalibration(l, Options{Kernel: tc.kernel})
			if !errors.Is(err, ErrConfig) {
				t.Errorf("err = %v, want ErrConfig", err)
			}
		})
	}
}

// The assembly reads params8 at fixed byte offsets.
func TestParams8Layout(t *testing.T) {
	var q params8
	for _, f := range []struct {
		name      string
		got, want uintptr
	}{
		{"xs", unsafe.Offsetof(q.xs), 0},
		{"ys", unsafe.Offsetof(q.ys), 32},
		{"weight", unsafe.Offsetof(q.weight), 288},
		{"satm1", unsafe.Offsetof(q.satm1), 544},
		{"thr", unsafe.Offsetof(q.thr), 576},
		{"negInf", unsafe.Offsetof(q.negInf), 608},
		{"hot", unsafe.Offsetof(q.hot), 640},
		{"hotOn", unsafe.Offsetof(q.hotOn), 644},
		{"floor", unsafe.Offsetof(q.floor), 652},
		{"wcog", unsafe.Offsetof(q.wcog), 648},
	} {
		if f.got != f.want {
			t.Errorf("params8.%s at byte %d, the assembly reads %d", f.name, f.got, f.want)
		}
	}
}

// pairs sums in adjacent pairs, the order of a register's horizontal add.
func TestPairs(t *testing.T) {
	for _, tc := range []struct {
		in   []float32
		want float32
	}{
		{[]float32{1}, 1},
		{[]float32{1, 2, 3}, 6},
		{[]float32{1, 2, 3, 4, 5, 6, 7, 8}, 36},
		// (1e8+(−1e8)) + (1+1): exact, where a running sum gives 1
		// (1e8+1 rounds to 1e8 in float32).
		{[]float32{1e8, -1e8, 1, 1, 0, 0, 0, 0}, 2},
		// Here each 1 meets a 1e8 first and is lost.
		{[]float32{1e8, 1, -1e8, 1, 0, 0, 0, 0}, 0},
	} {
		if got := pairs(slices.Clone(tc.in)); got != tc.want {
			t.Errorf("pairs(%v) = %v, want %v", tc.in, got, tc.want)
		}
	}
	// pairRows adds column by column in the same order: column 0 is the
	// last case above (a running sum would give 1).
	w := []float32{1e8, 1, 1, 2, -1e8, 3, 1, 4}
	if got := pairRows(w, 2, 4); !slices.Equal(got, []float32{0, 10}) {
		t.Errorf("pairRows = %v, want [0 10]", got)
	}
}
