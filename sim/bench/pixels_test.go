package bench_test

import (
	"context"
	"encoding/binary"
	"math"
	"testing"
	"time"

	"stillsky/controller/centroid"
	stillskyv1 "stillsky/proto/stillsky/v1"
	"stillsky/sim/bench"
	"stillsky/sim/scenario"
)

// serveCamera starts a lockstep bench for s on a unix socket and returns its
// camera client. No mirror is connected: each frame after the delay waits 2 ms
// for a command and goes on, so two benches of one scenario make the same
// frames under the same numbers.
func serveCamera(t *testing.T, s *scenario.Scenario) stillskyv1.CameraServiceClient {
	t.Helper()
	b, err := bench.NewServer(s, bench.Options{Lockstep: true, LockstepTimeout: 2 * time.Millisecond})
	if err != nil {
		t.Fatal(err)
	}
	_, conn := serve(t, b)
	return stillskyv1.NewCameraServiceClient(conn)
}

// pixelScenario is the small scenario in pixel mode, noise-free and on a
// star of magnitude 4 (4400 photo-electrons a subaperture, so that rounding to
// whole ADU costs the centroid little): 16-pixel
// windows at the Nyquist scale λ/(2d), wide enough that the centre of gravity
// of a turbulent spot (tilt about one pixel rms) loses little to the window's
// edge.
func pixelScenario(t *testing.T) *scenario.Scenario {
	s, err := scenario.Load("small")
	if err != nil {
		t.Fatal(err)
	}
	s.WFS.Noise = false
	s.GuideStar.Magnitude = 4
	s.WFS.Pixels = &scenario.Pixels{PixelsPerSubaperture: 16, PixelScale: s.GuideStar.Wavelength / (2 * s.SubapertureSize()),
		Bias: 100, FullWell: 60000, Gain: 1, FlatSeed: 1, Centroid: scenario.CentroidCoG}
	return s
}

// TestPixelFramesOverGRPC streams the same scenario from a slope camera and a
// pixel camera over real gRPC, in row chunks, and checks the pixel frames'
// geometry in Describe and in every chunk, and that their centres of gravity
// (controller/centroid, times the pixel scale) are the slope camera's slopes
// of the same frame: the centre of gravity of a pixel-integrated Gaussian is
// its centre (Rousset 1999, in Roddier, Adaptive Optics in Astronomy, ch. 5),
// which the window's edge biases by a small fraction here.
func TestPixelFramesOverGRPC(t *testing.T) {
	ctx := context.Background()
	sl, err := scenario.Load("small")
	if err != nil {
		t.Fatal(err)
	}
	sl.WFS.Noise = false
	sl.GuideStar.Magnitude = 4
	ps := pixelScenario(t)
	slopeCam, pixelCam := serveCamera(t, sl), serveCamera(t, ps)
	d, err := pixelCam.Describe(ctx, &stillskyv1.CameraServiceDescribeRequest{})
	if err != nil {
		t.Fatal(err)
	}
	g := d.GetPixels()
	side := 8 * 16
	if g == nil || g.GetPixelsPerSubaperture() != 16 || g.GetWidth() != uint32(side) || g.GetHeight() != uint32(side) ||
		g.GetPixelScaleRad() != ps.WFS.Pixels.PixelScale || g.GetBiasAdu() != 100 || g.GetSaturationAdu() != 60100 ||
		g.GetCentroid() != stillskyv1.CentroidMethod_CENTROID_METHOD_COG {
		t.Fatalf("pixel geometry %v", g)
	}
	if ds, err := slopeCam.Describe(ctx, &stillskyv1.CameraServiceDescribeRequest{}); err != nil || ds.GetPixels() != nil {
		t.Fatalf("a slope camera describes pixels: %v, %v", ds.GetPixels(), err)
	}
	valid := make([]int, len(d.GetValidSubapertures()))
	for i, v := range d.GetValidSubapertures() {
		valid[i] = int(v)
	}
	dark := make([]float32, side*side)
	for i := range dark {
		dark[i] = 100
	}
	cal, err := centroid.NewCalibration(centroid.Layout{Subapertures: 8, Pixels: 16, Valid: valid}, centroid.Options{Dark: dark})
	if err != nil {
		t.Fatal(err)
	}
	const chunks = 4
	ns := int(d.GetSlopeCount())
	frames := func(c stillskyv1.CameraServiceClient) stillskyv1.CameraService_StreamFramesClient {
		s, err := c.StreamFrames(ctx, &stillskyv1.StreamFramesRequest{Chunks: chunks})
		if err != nil {
			t.Fatal(err)
		}
		return s
	}
	// Frames of the pixel camera by number, centroided chunk by chunk.
	pix := frames(pixelCam)
	got := map[uint64][]float32{}
	frame := make([]uint16, side*side)
	work := make([]float32, 16*16)
	for len(got) < 20 {
		slopes := make([]float32, ns)
		var num uint64
		next := 0
		for c := 0; c < chunks; c++ {
			m, err := pix.Recv()
			if err != nil {
				t.Fatal(err)
			}
			if c == 0 {
				num = m.GetFrameNumber()
			}
			rows, first := int(m.GetRowCount()), int(m.GetFirstRow())
			if m.GetFrameNumber() != num || int(m.GetChunkIndex()) != c || m.GetChunkCount() != chunks ||
				first != next || rows != side/chunks || len(m.GetPixels()) != 2*rows*side || len(m.GetSlopes()) != 0 {
				t.Fatalf("frame %d chunk %d: number %d index %d/%d rows [%d, +%d) %d bytes %d slopes", num, c,
					m.GetFrameNumber(), m.GetChunkIndex(), m.GetChunkCount(), first, rows, len(m.GetPixels()), len(m.GetSlopes()))
			}
			if want := cal.RowsReady(first); int(m.GetOffset()) != 2*want {
				t.Fatalf("chunk %d: offset %d, want %d (the first slope of its rows)", c, m.GetOffset(), 2*want)
			}
			px := frame[:rows*side]
			for i := range px {
				px[i] = binary.LittleEndian.Uint16(m.GetPixels()[2*i:])
			}
			if _, err := cal.ProcessRows(px, first, first+rows, slopes, work); err != nil {
				t.Fatal(err)
			}
			next = first + rows
		}
		got[num] = slopes
	}
	sl2 := frames(slopeCam)
	var sum, diff float64
	matched := 0
	for matched < 10 {
		m, err := sl2.Recv()
		if err != nil {
			t.Fatal(err)
		}
		p, ok := got[m.GetFrameNumber()]
		if !ok || m.GetChunkIndex() != 0 {
			continue
		}
		for i, v := range m.GetSlopes() {
			j := int(m.GetOffset()) + i
			r := float64(p[j]) * ps.WFS.Pixels.PixelScale
			sum += float64(v) * float64(v)
			diff += (r - float64(v)) * (r - float64(v))
		}
		// Only the first chunk: enough, and the numbers of frames match per chunk.
		matched++
	}
	rel := math.Sqrt(diff / sum)
	t.Logf("pixel-mode slopes against the slope camera's: rms difference %.4f of the rms slope over %d frames", rel, matched)
	if rel > 0.01 {
		t.Errorf("pixel-mode slopes differ from the slope camera's by %.3f of the rms slope: want <= 0.01", rel)
	}
}
