package bench_test

import (
	"math"
	"testing"

	stillskyv1 "stillsky/proto/stillsky/v1"
	"stillsky/sim/bench"
	"stillsky/sim/scenario"
)

// TestFrameFlux streams the small scenario's frames over real gRPC in four
// chunks and checks the guide-star flux they report: every chunk carries its
// rows' share, and a frame's chunks add up, on average over the frames, to the
// photon count of the scenario's star, N = ZP·10^(−0.4·m)·throughput·A/rate
// summed over the valid subapertures' illuminated area (the photometric zero
// point's definition; Bessell, Castelli & Plez 1998), within four standard
// errors of its Poisson noise, √N per frame.
func TestFrameFlux(t *testing.T) {
	s, err := scenario.Load("small")
	if err != nil {
		t.Fatal(err)
	}
	sys, err := bench.NewSystem(s)
	if err != nil {
		t.Fatal(err)
	}
	g := s.GuideStar
	perArea := g.ZeroPoint * math.Pow(10, -0.4*g.Magnitude) * g.Throughput / s.Loop.FrameRate
	p := sys.Pupil()
	want := 0.0
	valid := sys.Sensor().Valid()
	n, per := s.WFS.Subapertures, p.N/s.WFS.Subapertures
	for sub, v := range valid {
		if !v {
			continue
		}
		sy, sx := sub/n, sub%n
		for y := range per {
			for x := range per {
				want += p.Mask[(sy*per+y)*p.N+sx*per+x] * p.Scale * p.Scale * perArea
			}
		}
	}

	b, err := bench.NewServer(s, bench.Options{})
	if err != nil {
		t.Fatal(err)
	}
	ctx, conn := serve(t, b)
	frames, err := stillskyv1.NewCameraServiceClient(conn).StreamFrames(ctx, &stillskyv1.StreamFramesRequest{Chunks: 4})
	if err != nil {
		t.Fatal(err)
	}
	const count = 200
	var sum float64
	got := 0
	for got < count {
		var frame float64
		for c := range 4 {
			m, err := frames.Recv()
			if err != nil {
				t.Fatal(err)
			}
			if int(m.GetChunkIndex()) != c {
				t.Fatalf("chunk %d of frame %d, want %d", m.GetChunkIndex(), m.GetFrameNumber(), c)
			}
			if f := m.GetFluxElectrons(); !(f > 0) || float64(f) > want {
				t.Fatalf("frame %d chunk %d: flux %g e-, want a share of the frame's %.0f", m.GetFrameNumber(), c, f, want)
			}
			frame += float64(m.GetFluxElectrons())
		}
		sum += frame
		got++
	}
	mean := sum / count
	tol := 4 * math.Sqrt(want/count)
	t.Logf("mean flux %.1f e- per frame over %d frames, zero point gives %.1f ± %.1f", mean, count, want, tol)
	if math.Abs(mean-want) > tol {
		t.Errorf("mean flux %.1f e- per frame, want %.1f ± %.1f", mean, want, tol)
	}
}
