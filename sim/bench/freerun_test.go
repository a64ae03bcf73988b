package bench_test

import (
	"context"
	"math"
	"path/filepath"
	"testing"
	"time"

	"stillsky/internal/rpc"
	stillskyv1 "stillsky/proto/stillsky/v1"
	"stillsky/sim/bench"
	"stillsky/sim/scenario"
)

// TestFreeRunDelay checks the free-running camera's timing model over real
// gRPC streams: frames leave on the camera clock, and frame j shows the mirror
// command that arrived last before tick j−1, the readout before it. With a
// loop that answers within a frame this is the two-frame delay of a
// free-running Shack–Hartmann loop — integrate during one frame, read out and
// correct during the next (Hardy, Adaptive Optics for Astronomical
// Telescopes, §9.4; common practice). The calibration source (no turbulence,
// no noise) makes every frame before the poke exactly zero and every frame
// after it not.
func TestFreeRunDelay(t *testing.T) {
	s, err := scenario.Load("small")
	if err != nil {
		t.Fatal(err)
	}
	b, err := bench.NewServer(s, bench.Options{})
	if err != nil {
		t.Fatal(err)
	}
	dir := t.TempDir()
	cam := "unix:" + filepath.Join(dir, "cam.sock")
	l, err := bench.Listen(bench.Addrs{Camera: cam})
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- b.Serve(ctx, l) }()
	defer func() { cancel(); <-done }()
	conn, err := rpc.Dial(cam, rpc.DeviceDialOptions()...)
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close()
	camera := stillskyv1.NewCameraServiceClient(conn)
	if _, err := camera.SetSource(ctx, &stillskyv1.SetSourceRequest{Source: stillskyv1.Source_SOURCE_CALIBRATION}); err != nil {
		t.Fatal(err)
	}
	desc, err := stillskyv1.NewMirrorServiceClient(conn).Describe(ctx, &stillskyv1.MirrorServiceDescribeRequest{})
	if err != nil {
		t.Fatal(err)
	}
	frames, err := camera.StreamFrames(ctx, &stillskyv1.StreamFramesRequest{})
	if err != nil {
		t.Fatal(err)
	}
	mirror, err := stillskyv1.NewMirrorServiceClient(conn).StreamCommands(ctx)
	if err != nil {
		t.Fatal(err)
	}
	period := int64(time.Second) / int64(s.Loop.FrameRate)
	type frame struct {
		num     uint64
		readout int64
		lit     bool
	}
	var got []frame
	recv := func() frame {
		f, err := frames.Recv()
		if err != nil {
			t.Fatal(err)
		}
		lit := false
		for _, v := range f.GetSlopes() {
			lit = lit || v != 0
		}
		fr := frame{f.GetFrameNumber(), f.GetReadoutEndNs(), lit}
		got = append(got, fr)
		return fr
	}
	// Settle on the calibration source: frames simulated before it may be turbulent.
	for range 20 {
		recv()
	}
	for _, f := range got[len(got)-5:] {
		if f.lit {
			t.Fatalf("frame %d on the calibration source with a flat mirror has non-zero slopes", f.num)
		}
	}
	recv()
	cmd := make([]float32, desc.GetActuatorCount())
	for i := range cmd {
		cmd[i] = 1e-7
	}
	if err := mirror.Send(&stillskyv1.StreamCommandsRequest{Values: cmd}); err != nil {
		t.Fatal(err)
	}
	ack, err := mirror.Recv()
	if err != nil {
		t.Fatal(err)
	}
	arrived := ack.GetReceivedNs()
	first := -1
	for len(got) < 60 {
		if f := recv(); f.lit && first < 0 {
			first = len(got) - 1
		}
	}
	if first < 0 {
		t.Fatal("no frame showed the command")
	}
	for _, f := range got[first:] {
		if !f.lit {
			t.Fatalf("frame %d after the command has zero slopes", f.num)
		}
	}
	// The camera clock: tick j = t0 + j·period, and a frame leaves at its tick or
	// later, so the earliest readout time less j·period is t0 to within the spin
	// of the camera's wait.
	t0 := int64(math.MaxInt64)
	for i, f := range got {
		if i > 0 && f.num != got[i-1].num+1 {
			t.Fatalf("frame %d follows frame %d", f.num, got[i-1].num)
		}
		t0 = min(t0, f.readout-int64(f.num)*period)
	}
	tick := func(num uint64) int64 { return t0 + int64(num)*period }
	lit := got[first].num
	const slack = 50_000 // ns: how late the earliest of 60 frames may have left its tick
	if !(arrived <= tick(lit-1)+slack && arrived > tick(lit-2)-slack) {
		t.Errorf("command arrived %d µs after tick %d; first frame to show it: %d (want %d)",
			(arrived-tick(lit-2))/1000, lit-2, lit, lit)
	}
	// Frames leave late when the sending thread is descheduled, never early, so
	// the earliest departure in each half of the run sits on the clock: the two
	// halves' clock origins agree if the clock ticks at the frame period (a
	// period 0.5 % off would part them by 300 µs over 30 frames).
	origin := func(fs []frame) int64 {
		o := int64(math.MaxInt64)
		for _, f := range fs {
			o = min(o, f.readout-int64(f.num)*period)
		}
		return o
	}
	half := len(got) / 2
	if d := origin(got[half:]) - origin(got[:half]); d < -100_000 || d > 100_000 {
		t.Errorf("clock origins of the two halves differ by %d µs: the camera does not tick every %d µs", d/1000, period/1000)
	}
}
