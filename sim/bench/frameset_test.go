package bench_test

import (
	"slices"
	"strings"
	"testing"
	"time"

	stillskyv1 "stillsky/proto/stillsky/v1"
	"stillsky/sim/bench"
	"stillsky/sim/scenario"
)

func TestNewFrameSet(t *testing.T) {
	set, err := bench.NewFrameSet([]float32{1, 2, 3, 4, 5, 6}, 2)
	if err != nil {
		t.Fatal(err)
	}
	if set.Len() != 3 || set.NumSlopes() != 2 {
		t.Fatalf("%d frames of %d slopes, want 3 of 2", set.Len(), set.NumSlopes())
	}
	for k, want := range map[uint64][]float32{1: {1, 2}, 3: {5, 6}, 4: {1, 2}, 8: {3, 4}} {
		if got := set.Frame(k); !slices.Equal(got, want) {
			t.Errorf("frame %d carries %v, want %v", k, got, want)
		}
	}
	for _, c := range []struct {
		n, per int
	}{{0, 2}, {5, 2}, {4, 0}, {1, 2}} {
		if _, err := bench.NewFrameSet(make([]float32, c.n), c.per); err == nil {
			t.Errorf("NewFrameSet(%d slopes, %d per frame) accepted", c.n, c.per)
		}
	}
}

// TestPrerenderedCamera streams a bench with a pre-rendered camera over real
// gRPC: on the sky, frame k carries pre-rendered frame (k−1) mod 5 whatever the
// mirror does (the set repeats with period 5, and a poke changes nothing); on
// the calibration source (noise off, a flat mirror) the bench simulates again
// and a frame is exactly zero; back on the sky the set returns.
func TestPrerenderedCamera(t *testing.T) {
	s, err := scenario.Load("small")
	if err != nil {
		t.Fatal(err)
	}
	if _, err := bench.NewServer(s, bench.Options{Prerendered: 5, Lockstep: true}); err == nil {
		t.Error("a lockstep bench with a pre-rendered camera accepted")
	}
	b, err := bench.NewServer(s, bench.Options{Prerendered: 5})
	if err != nil {
		t.Fatal(err)
	}
	ctx, conn := serve(t, b)
	camera := stillskyv1.NewCameraServiceClient(conn)
	desc, err := stillskyv1.NewMirrorServiceClient(conn).Describe(ctx, &stillskyv1.MirrorServiceDescribeRequest{})
	if err != nil {
		t.Fatal(err)
	}
	cd, err := camera.Describe(ctx, &stillskyv1.CameraServiceDescribeRequest{})
	if err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(cd.GetDescription(), "pre-rendered camera: 5 frames") {
		t.Errorf("camera description %q does not say it is pre-rendered", cd.GetDescription())
	}
	frames, err := camera.StreamFrames(ctx, &stillskyv1.StreamFramesRequest{})
	if err != nil {
		t.Fatal(err)
	}
	mirror, err := stillskyv1.NewMirrorServiceClient(conn).StreamCommands(ctx)
	if err != nil {
		t.Fatal(err)
	}
	poke := make([]float32, desc.GetActuatorCount())
	for i := range poke {
		poke[i] = 1e-7
	}
	if err := mirror.Send(&stillskyv1.StreamCommandsRequest{Values: poke}); err != nil {
		t.Fatal(err)
	}
	if _, err := mirror.Recv(); err != nil {
		t.Fatal(err)
	}
	seen := map[uint64][]float32{} // by (k−1) mod 5
	nonzero := false
	for range 40 {
		f, err := frames.Recv()
		if err != nil {
			t.Fatal(err)
		}
		i := (f.GetFrameNumber() - 1) % 5
		if prev, ok := seen[i]; ok && !slices.Equal(prev, f.GetSlopes()) {
			t.Fatalf("frame %d differs from the pre-rendered frame %d seen before", f.GetFrameNumber(), i)
		}
		seen[i] = slices.Clone(f.GetSlopes())
		nonzero = nonzero || slices.ContainsFunc(f.GetSlopes(), func(v float32) bool { return v != 0 })
	}
	if len(seen) != 5 || !nonzero {
		t.Fatalf("%d distinct pre-rendered frames seen, noise %v: want all 5, with the scenario's noise", len(seen), nonzero)
	}
	source := func(src stillskyv1.Source) {
		t.Helper()
		if _, err := camera.SetSource(ctx, &stillskyv1.SetSourceRequest{Source: src}); err != nil {
			t.Fatal(err)
		}
	}
	if err := mirror.Send(&stillskyv1.StreamCommandsRequest{Values: make([]float32, len(poke))}); err != nil {
		t.Fatal(err)
	}
	source(stillskyv1.Source_SOURCE_CALIBRATION)
	zero := 0
	for n := 0; n < 50 && zero < 3; n++ {
		f, err := frames.Recv()
		if err != nil {
			t.Fatal(err)
		}
		if slices.ContainsFunc(f.GetSlopes(), func(v float32) bool { return v != 0 }) {
			zero = 0
			continue
		}
		zero++
	}
	if zero < 3 {
		t.Fatal("on the calibration source with a flat mirror, no three zero frames in a row: the bench does not simulate")
	}
	source(stillskyv1.Source_SOURCE_SKY)
	// Paused, the clock runs on: the first frame after resuming shows a gap.
	f, err := frames.Recv()
	if err != nil {
		t.Fatal(err)
	}
	if _, err := camera.SetAcquisition(ctx, &stillskyv1.SetAcquisitionRequest{Paused: true}); err != nil {
		t.Fatal(err)
	}
	time.Sleep(50 * time.Millisecond) // 25 periods of the small scenario
	if _, err := camera.SetAcquisition(ctx, &stillskyv1.SetAcquisitionRequest{Paused: false}); err != nil {
		t.Fatal(err)
	}
	last := f.GetFrameNumber()
	for range 8 { // the ring's frames made before the pause, then the gap
		g, err := frames.Recv()
		if err != nil {
			t.Fatal(err)
		}
		if g.GetFrameNumber() > last+10 {
			last = 0
			break
		}
		last = g.GetFrameNumber()
	}
	if last != 0 {
		t.Fatal("no gap in the frame numbers after a 50 ms pause")
	}
	for n := 0; ; n++ {
		f, err := frames.Recv()
		if err != nil {
			t.Fatal(err)
		}
		if slices.Equal(f.GetSlopes(), seen[(f.GetFrameNumber()-1)%5]) {
			break
		}
		if n == 20 {
			t.Fatal("back on the sky, the pre-rendered frames do not return")
		}
	}
}

// TestPrerenderedPixelCamera: a pixel camera's pre-rendered set streams
// detector images too: frame k carries image (k−1) mod 3, the same bytes each
// time round, with the sensor's noise drawn into it (the images differ), and
// the frame's full size in its chunk.
func TestPrerenderedPixelCamera(t *testing.T) {
	s, err := scenario.Load("pixels")
	if err != nil {
		t.Fatal(err)
	}
	b, err := bench.NewServer(s, bench.Options{Prerendered: 3})
	if err != nil {
		t.Fatal(err)
	}
	ctx, conn := serve(t, b)
	camera := stillskyv1.NewCameraServiceClient(conn)
	cd, err := camera.Describe(ctx, &stillskyv1.CameraServiceDescribeRequest{})
	if err != nil {
		t.Fatal(err)
	}
	g := cd.GetPixels()
	if g == nil {
		t.Fatal("the pixels scenario's camera describes no pixel geometry")
	}
	frames, err := camera.StreamFrames(ctx, &stillskyv1.StreamFramesRequest{})
	if err != nil {
		t.Fatal(err)
	}
	seen := map[uint64][]byte{}
	for range 12 {
		f, err := frames.Recv()
		if err != nil {
			t.Fatal(err)
		}
		if len(f.GetPixels()) != int(2*g.GetWidth()*g.GetHeight()) {
			t.Fatalf("frame %d: %d bytes of pixels, want %d", f.GetFrameNumber(), len(f.GetPixels()), 2*g.GetWidth()*g.GetHeight())
		}
		i := (f.GetFrameNumber() - 1) % 3
		if prev, ok := seen[i]; ok && !slices.Equal(prev, f.GetPixels()) {
			t.Fatalf("frame %d differs from the pre-rendered image %d seen before", f.GetFrameNumber(), i)
		}
		seen[i] = slices.Clone(f.GetPixels())
	}
	if len(seen) != 3 || slices.Equal(seen[0], seen[1]) {
		t.Fatalf("%d distinct images, first two equal %v: want 3 images with their own noise", len(seen), slices.Equal(seen[0], seen[1]))
	}
}
