package bench_test

import (
	"testing"
	"time"

	stillskyv1 "stillsky/proto/stillsky/v1"
	"stillsky/sim/bench"
	"stillsky/sim/scenario"
)

// TestFreeRunDelay checks the free-running camera's timing model over real
// gRPC streams: frames are stamped with the ticks of the camera clock, and
// frame j shows the mirror command that arrived last before tick j−1, the
// readout before it. With a loop that answers within a frame this is the
// two-frame delay of a free-running Shack–Hartmann loop — integrate during one
// frame, read out and correct during the next (Hardy, Adaptive Optics for
// Astronomical Telescopes, §9.4; common practice). The calibration source (no
// turbulence, no noise) makes every frame with a flat mirror exactly zero and
// every frame with the poke not.
func TestFreeRunDelay(t *testing.T) {
	s, err := scenario.Load("small")
	if err != nil {
		t.Fatal(err)
	}
	b, err := bench.NewServer(s, bench.Options{})
	if err != nil {
		t.Fatal(err)
	}
	ctx, conn := serve(t, b)
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
	// The camera stamps each frame with its readout tick, one period after the
	// one before, except where its clock, far behind on an overloaded machine,
	// resynchronises (a jump of more than 10 periods; sim/bench/clock.go).
	readout := func(num uint64) (int64, bool) {
		for i := len(got) - 1; i >= 0; i-- {
			if got[i].num == num {
				return got[i].readout, true
			}
		}
		return 0, false
	}
	// Poke the mirror, then flatten it, and so on: each time, the first frame
	// to show the new shape must be the one whose previous tick came after the
	// command arrived. A consumer slowed down (the race detector, a busy
	// machine) may lose frames at the bench; a transition whose preceding frame
	// was lost proves nothing and is tried again.
	poke := make([]float32, desc.GetActuatorCount())
	for i := range poke {
		poke[i] = 1e-7
	}
	flat := make([]float32, len(poke))
	checked := 0
	for attempt := 0; attempt < 12 && checked < 4; attempt++ {
		lit, cmd := attempt%2 == 0, flat
		if lit {
			cmd = poke
		}
		if err := mirror.Send(&stillskyv1.StreamCommandsRequest{Values: cmd}); err != nil {
			t.Fatal(err)
		}
		ack, err := mirror.Recv()
		if err != nil {
			t.Fatal(err)
		}
		arrived := ack.GetReceivedNs()
		prev := got[len(got)-1]
		var first frame
		for n := 0; ; n++ {
			f := recv()
			if f.lit == lit {
				first = f
				break
			}
			if n == 50 {
				t.Fatalf("50 frames after the command, none shows it (lit %v)", lit)
			}
			prev = f
		}
		for range 3 {
			if f := recv(); f.lit != lit {
				t.Fatalf("frame %d after frame %d showed the command, lit %v, no longer shows it", f.num, first.num, lit)
			}
		}
		before, ok1 := readout(first.num - 1)
		earlier, ok2 := readout(first.num - 2)
		if prev.num+1 != first.num || !ok1 || !ok2 {
			continue // frames lost at the transition
		}
		checked++
		// Both times come from the bench's CLOCK_MONOTONIC: the rule is exact.
		if !(arrived <= before && arrived > earlier) {
			t.Errorf("command arrived %d µs after tick %d; first frame to show it: %d (want %d)",
				(arrived-earlier)/1000, first.num-2, first.num, first.num)
		}
	}
	if checked == 0 {
		t.Fatal("frames were lost around every transition")
	}
	for i := 1; i < len(got); i++ {
		a, b := got[i-1], got[i]
		if b.num <= a.num {
			t.Fatalf("frame %d came after frame %d", b.num, a.num)
		}
		gap, want := b.readout-a.readout, int64(b.num-a.num)*period
		if gap != want && gap <= want+10*period {
			t.Fatalf("frames %d and %d stamped %d ns apart, want %d (a whole number of periods, or a resynchronisation of more than 10 periods)",
				a.num, b.num, gap, want)
		}
	}
}
