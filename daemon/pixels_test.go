package daemon

import (
	"encoding/binary"
	"math/rand/v2"
	"slices"
	"testing"
	"time"
	"unsafe"

	"gonum.org/v1/gonum/mat"

	"stillsky/controller"
	"stillsky/controller/centroid"
	"stillsky/internal/monoclock"
	stillskyv1 "stillsky/proto/stillsky/v1"
	"stillsky/sim/detector"
)

// pixelRig is a pixel camera's geometry (8×8 windows of 8 pixels, every
// window valid) and one rendered frame cut into chunks of two window rows.
type pixelRig struct {
	desc   *stillskyv1.CameraServiceDescribeResponse
	g      *pixelGeometry
	chunks []*stillskyv1.StreamFramesResponse
	raw    []uint16
	offs   []float64 // the spots' offsets in pixels
}

const pixelRigScale = 1e-6 // rad per pixel

func newPixelRig(t *testing.T, chunks int) *pixelRig {
	t.Helper()
	const n, p = 8, 8
	valid := make([]uint32, n*n)
	iv := make([]int, n*n)
	for i := range valid {
		valid[i], iv[i] = uint32(i), i
	}
	desc := &stillskyv1.CameraServiceDescribeResponse{Subapertures: n, ValidSubapertures: valid, SlopeCount: 2 * n * n,
		Pixels: &stillskyv1.PixelGeometry{PixelsPerSubaperture: p, Width: n * p, Height: n * p, PixelScaleRad: pixelRigScale,
			BiasAdu: 100, SaturationAdu: 60000, GainEPerAdu: 1, Centroid: stillskyv1.CentroidMethod_CENTROID_METHOD_COG}}
	g, err := newPixelGeometry(desc)
	if err != nil {
		t.Fatal(err)
	}
	det, err := detector.New(detector.Config{Subapertures: n, Valid: iv, Pixels: p, Sigma: 1, Photons: 5000,
		Bias: 100, Gain: 1, FullWell: 60000})
	if err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(5, 6))
	r := &pixelRig{desc: desc, g: g, raw: make([]uint16, det.Side()*det.Side()), offs: make([]float64, 2*n*n)}
	for i := range r.offs {
		r.offs[i] = 0.3 * rng.NormFloat64()
	}
	if err := det.Render(r.raw, r.offs, rng); err != nil {
		t.Fatal(err)
	}
	w := n * p
	rows := w / chunks
	for c := 0; c < chunks; c++ {
		b := make([]byte, 2*rows*w)
		for i, v := range r.raw[c*rows*w : (c+1)*rows*w] {
			binary.LittleEndian.PutUint16(b[2*i:], v)
		}
		r.chunks = append(r.chunks, &stillskyv1.StreamFramesResponse{ChunkIndex: uint32(c), ChunkCount: uint32(chunks),
			Offset: uint32(2 * c * rows / p * n), FirstRow: uint32(c * rows), RowCount: uint32(rows), Pixels: b})
	}
	return r
}

// A pixel frame's chunks assemble into the slopes controller/centroid gives
// the whole frame, times the pixel scale, and those are the spots' offsets
// (noise-free spots of σ = 1 pixel, 0.3 pixel rms offsets; the centre of
// gravity of a pixel-integrated Gaussian is its centre, Rousset 1999 in
// Roddier, Adaptive Optics in Astronomy, less what the 8-pixel window cuts
// and the whole-ADU rounding add, 0.02 pixel here).
func TestPixelChunksAssemble(t *testing.T) {
	r := newPixelRig(t, 4)
	cal, err := r.g.defaultCalibration()
	if err != nil {
		t.Fatal(err)
	}
	a := newAssembler(int(r.desc.GetSlopeCount()))
	a.px = newPixelFrames(r.g, func() *centroid.Calibration { return cal })
	for c, m := range r.chunks {
		m.FrameNumber = 1
		v := a.add(m)
		want := chunkPartial
		if c == len(r.chunks)-1 {
			want = frameComplete
		}
		if v.verdict != want || v.from != int(m.GetOffset()) || v.to != int(m.GetOffset())+2*2*8 {
			t.Fatalf("chunk %d: %+v, want verdict %v over [%d, %d)", c, v, want, m.GetOffset(), m.GetOffset()+32)
		}
	}
	whole := make([]float32, len(a.slopes))
	if _, err := cal.Process(r.raw, whole, make([]float32, 64)); err != nil {
		t.Fatal(err)
	}
	var worst float64
	for i, s := range a.slopes {
		if want := whole[i] * pixelRigScale; s != want {
			t.Fatalf("slope %d: %g from the chunks, %g from the whole frame", i, s, want)
		}
		worst = max(worst, abs(float64(s)/pixelRigScale-r.offs[i]))
	}
	t.Logf("largest centroid error %.4f pixel", worst)
	if worst > 0.02 {
		t.Errorf("largest centroid error %.3f pixel: want below 0.02", worst)
	}
}

func abs(x float64) float64 {
	if x < 0 {
		return -x
	}
	return x
}

// The pixel path — decode, calibrate, centroid chunk by chunk, the multiply
// of each chunk's slopes, metrics — allocates nothing per frame, open and
// closed (docs/hot-path.md).
func TestPixelFrameCodeAllocatesNothing(t *testing.T) {
	d, err := New(Config{CameraAddr: "127.0.0.1:1", MirrorAddr: "127.0.0.1:2", ListenAddr: "127.0.0.1:0", MetricsAddr: "-"})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { d.ctlLis.Close() })
	r := newPixelRig(t, 4)
	ns, na := int(r.desc.GetSlopeCount()), 60
	g := &geometry{slopes: ns, actuators: na, frameRate: 1000, stroke: 3e-6, delayFrames: 1, lockstep: true, pixels: r.g}
	d.geom = g
	cal, err := r.g.defaultCalibration()
	if err != nil {
		t.Fatal(err)
	}
	d.u.pixCal.Store(cal)
	rng := rand.New(rand.NewPCG(1, 1))
	m := mat.NewDense(na, ns, nil)
	for i := 0; i < na; i++ {
		for j := 0; j < ns; j++ {
			m.Set(i, j, 1e-4*rng.NormFloat64())
		}
	}
	rec, err := controller.ReconstructorFromMatrix(m, time.Unix(0, 0))
	if err != nil {
		t.Fatal(err)
	}
	if err := d.installReconstructor(rec, false); err != nil {
		t.Fatal(err)
	}
	rt := newRealtime(d.u, g)
	num := uint64(0)
	step := func() {
		num++
		now := monoclock.Now()
		for c, f := range r.chunks {
			f.FrameNumber = num
			if sent := rt.receive(f, now); sent != (c == len(r.chunks)-1) {
				t.Fatalf("chunk %d: sent %v", c, sent)
			}
		}
		rt.delivered(r.chunks[len(r.chunks)-1], now, now+1000, now+10000)
	}
	for _, s := range []loopState{stateOpen, stateClosed} {
		d.u.request(s)
		step()
		if got := d.u.current(); got != s {
			t.Fatalf("state %v, want %v", stateNames[got], stateNames[s])
		}
		if a := testing.AllocsPerRun(200, step); a != 0 {
			t.Errorf("%s: %v allocations per pixel frame, want 0", stateNames[s], a)
		}
	}
	if rt.pipe == nil {
		t.Error("closed with chunks, the multiply did not run chunk by chunk")
	}
}

// A pixel chunk of the wrong size or off the detector's rows of windows is
// refused, with the rest of its frame, under its own reason.
func TestPixelChunksRefused(t *testing.T) {
	for _, c := range []struct {
		name  string
		chunk int
		edit  func(m *stillskyv1.StreamFramesResponse)
		want  verdict
	}{
		{"pixel bytes short", 1, func(m *stillskyv1.StreamFramesResponse) { m.Pixels = m.Pixels[:len(m.Pixels)-2] }, refusedPixelCount},
		{"odd byte count", 0, func(m *stillskyv1.StreamFramesResponse) { m.Pixels = m.Pixels[:len(m.Pixels)-1] }, refusedPixelCount},
		{"slopes beside pixels", 0, func(m *stillskyv1.StreamFramesResponse) { m.Slopes = []float32{0} }, refusedPixelCount},
		{"a row count off the windows", 1, func(m *stillskyv1.StreamFramesResponse) {
			m.RowCount -= 1
			m.Pixels = m.Pixels[:2*int(m.RowCount)*64]
		}, refusedChunkLayout},
		{"rows skipped", 1, func(m *stillskyv1.StreamFramesResponse) { m.FirstRow += 8 }, refusedChunkLayout},
		{"rows past the detector", 3, func(m *stillskyv1.StreamFramesResponse) { m.FirstRow = 56 }, refusedChunkLayout},
		{"wrong slope offset", 2, func(m *stillskyv1.StreamFramesResponse) { m.Offset += 2 }, refusedChunkLayout},
		{"frame ends short", 2, func(m *stillskyv1.StreamFramesResponse) { m.ChunkCount = 3 }, refusedChunkLayout},
		// Window (2, 3) lies in chunk 1 (rows 16–31), at columns 24–31.
		{"dead row", 3, func(*stillskyv1.StreamFramesResponse) {}, refusedDeadRow},
		{"hot pixel", 3, func(*stillskyv1.StreamFramesResponse) {}, refusedHotPixel},
		{"saturated spot", 3, func(*stillskyv1.StreamFramesResponse) {}, refusedSaturated},
	} {
		t.Run(c.name, func(t *testing.T) {
			r := newPixelRig(t, 4)
			cal, err := r.g.defaultCalibration()
			if err != nil {
				t.Fatal(err)
			}
			a := newAssembler(int(r.desc.GetSlopeCount()))
			a.px = newPixelFrames(r.g, func() *centroid.Calibration { return cal })
			c.edit(r.chunks[c.chunk])
			px := r.chunks[1].Pixels
			set := func(x, y int, v uint16) { binary.LittleEndian.PutUint16(px[2*((y-16)*64+x):], v) }
			switch c.want {
			case refusedDeadRow:
				for x := 24; x < 32; x++ {
					set(x, 17, 0)
				}
			case refusedHotPixel:
				set(24, 16, 3100) // 3000 ADU in a corner, the spot's peak about 730
			case refusedSaturated:
				set(28, 20, 60000) // the spot's centre at the saturation level
			}
			for i, m := range r.chunks {
				m.FrameNumber = 1
				v := a.add(m)
				switch {
				case i < c.chunk && v.verdict != chunkPartial:
					t.Fatalf("chunk %d before the bad one: %v", i, v.verdict)
				case i == c.chunk && v.verdict != c.want:
					t.Fatalf("bad chunk %d: verdict %v, want %v", i, v.verdict, c.want)
				case i > c.chunk && v.verdict != chunkIgnored:
					t.Fatalf("chunk %d after the bad one: %v, want ignored", i, v.verdict)
				}
			}
			// The next frame is taken as usual.
			r2 := newPixelRig(t, 4)
			for i, m := range r2.chunks {
				m.FrameNumber = 2
				if v := a.add(m); v.verdict.refused() || (i == 3) != (v.verdict == frameComplete) {
					t.Fatalf("next frame, chunk %d: %v", i, v.verdict)
				}
			}
		})
	}
}

// A frame refused for a defect computes no command: the last good command is
// what the mirror holds, and the refusal is counted.
func TestPixelDefectHoldsCommand(t *testing.T) {
	d, err := New(Config{CameraAddr: "127.0.0.1:1", MirrorAddr: "127.0.0.1:2", ListenAddr: "127.0.0.1:0", MetricsAddr: "-"})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { d.ctlLis.Close() })
	r := newPixelRig(t, 1)
	ns, na := int(r.desc.GetSlopeCount()), 30
	g := &geometry{slopes: ns, actuators: na, frameRate: 1000, stroke: 3e-6, delayFrames: 1, lockstep: true, pixels: r.g}
	d.geom = g
	cal, err := r.g.defaultCalibration()
	if err != nil {
		t.Fatal(err)
	}
	d.u.pixCal.Store(cal)
	m := mat.NewDense(na, ns, nil)
	rng := rand.New(rand.NewPCG(2, 2))
	for i := 0; i < na; i++ {
		for j := 0; j < ns; j++ {
			m.Set(i, j, 1e-3*rng.NormFloat64())
		}
	}
	rec, err := controller.ReconstructorFromMatrix(m, time.Unix(0, 0))
	if err != nil {
		t.Fatal(err)
	}
	if err := d.installReconstructor(rec, false); err != nil {
		t.Fatal(err)
	}
	rt := newRealtime(d.u, g)
	d.u.request(stateClosed)
	f := r.chunks[0]
	for n := uint64(1); n <= 3; n++ {
		f.FrameNumber = n
		now := monoclock.Now()
		if !rt.receive(f, now) {
			t.Fatalf("good frame %d refused", n)
		}
		rt.delivered(f, now, now, now)
	}
	held := slices.Clone(rt.sent)
	if slices.Equal(held, make([]float32, na)) {
		t.Fatal("the loop sent nothing but zeros")
	}
	binary.LittleEndian.PutUint16(f.Pixels[2*(16*64+24):], 3100) // a hot pixel in window (2, 3)
	before := d.u.stats.rejected.Load()
	f.FrameNumber = 4
	if rt.receive(f, monoclock.Now()) {
		t.Fatal("a frame with a hot pixel was used")
	}
	if got := d.u.stats.rejected.Load() - before; got != 1 {
		t.Errorf("%d refusals counted, want 1", got)
	}
	if !slices.Equal(rt.sent, held) {
		t.Error("the command changed on a refused frame")
	}
}

// The view of the wire's bytes reads the same pixels as decoding them one by
// one, and at an odd address the decoder falls back to the loop.
func TestWireView(t *testing.T) {
	// A uint16 array is 2-byte aligned wherever it lives; a byte array on the
	// stack need not be.
	words := make([]uint16, 1001)
	b := unsafe.Slice((*byte)(unsafe.Pointer(&words[0])), 2*len(words))
	for i := range b {
		b[i] = byte(i * 7)
	}
	for _, off := range []int{0, 1} {
		v, ok := wireView(b[off : off+2000])
		if off == 1 && ok {
			t.Fatal("a view at an odd address")
		}
		if off == 1 || !littleEndian {
			continue
		}
		if !ok {
			t.Fatal("no view of an aligned buffer on a little-endian host")
		}
		for i, x := range v {
			if want := binary.LittleEndian.Uint16(b[2*i:]); x != want {
				t.Fatalf("pixel %d: %d, want %d", i, x, want)
			}
		}
	}
}

// BenchmarkPixelDecode: one default-scenario detector frame (192² pixels)
// decoded pixel by pixel, against copied out of the in-place view.
func BenchmarkPixelDecode(b *testing.B) {
	src := make([]byte, 2*192*192)
	dst := make([]uint16, 192*192)
	b.Run("loop", func(b *testing.B) {
		for b.Loop() {
			for i := range dst {
				dst[i] = uint16(src[2*i]) | uint16(src[2*i+1])<<8
			}
		}
	})
	b.Run("view", func(b *testing.B) {
		for b.Loop() {
			v, _ := wireView(src)
			copy(dst, v)
		}
	})
}
