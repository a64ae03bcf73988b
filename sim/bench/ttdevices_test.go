package bench_test

import (
	"context"
	"math"
	"path/filepath"
	"testing"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	"stillsky/internal/rpc"
	stillskyv1 "stillsky/proto/stillsky/v1"
	"stillsky/sim/bench"
	"stillsky/sim/scenario"
)

// TestTipTiltDevices drives the lgs bench's tip-tilt sensor and tip-tilt
// mirror over real gRPC, in lockstep, on the calibration source (no
// turbulence, no noise): Describe gives the quad cell's and the mirror's
// geometry; tip-tilt frame j comes with laser-sensor frame 2j (250 Hz
// against 500 Hz); a tilt command answering tip-tilt frame 1 shapes the
// frames from 3 on (one frame of delay), where the quad cell reads the
// mirror's tilt back with the opposite sign (the residual is −tilt) and every
// laser subaperture loses the same tilt (the tip-tilt mirror is in the common
// path). The quad cell's gain σ√(π/2) makes it unit-slope at the null
// (sim/wfs); at 1e-7 rad, 0.08 σ, its nonlinearity is below 0.2%.
func TestTipTiltDevices(t *testing.T) {
	s, err := scenario.Load("lgs")
	if err != nil {
		t.Fatal(err)
	}
	b, err := bench.NewServer(s, bench.Options{Lockstep: true})
	if err != nil {
		t.Fatal(err)
	}
	dir := t.TempDir()
	cam, tt := "unix:"+filepath.Join(dir, "cam.sock"), "unix:"+filepath.Join(dir, "tt.sock")
	l, err := bench.Listen(bench.Addrs{Camera: cam, TipTilt: tt})
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- b.Serve(ctx, l) }()
	defer func() { cancel(); <-done }()
	connCam, err := rpc.Dial(cam, rpc.DeviceDialOptions()...)
	if err != nil {
		t.Fatal(err)
	}
	defer connCam.Close()
	connTT, err := rpc.Dial(tt, rpc.DeviceDialOptions()...)
	if err != nil {
		t.Fatal(err)
	}
	defer connTT.Close()
	camera, ttCamera := stillskyv1.NewCameraServiceClient(connCam), stillskyv1.NewCameraServiceClient(connTT)
	dmClient, ttMirror := stillskyv1.NewMirrorServiceClient(connCam), stillskyv1.NewMirrorServiceClient(connTT)

	cd, err := ttCamera.Describe(ctx, &stillskyv1.CameraServiceDescribeRequest{})
	if err != nil {
		t.Fatal(err)
	}
	if cd.GetSensorKind() != stillskyv1.SensorKind_SENSOR_KIND_QUAD_CELL || cd.GetSlopeCount() != 2 || cd.GetFrameRateHz() != 250 ||
		cd.GetStarMagnitude() != 13 || cd.GetSubapertures() != 1 || len(cd.GetValidSubapertures()) != 1 || cd.GetPupilDiameterM() != 8 {
		t.Fatalf("tip-tilt camera describes %v", cd)
	}
	md, err := ttMirror.Describe(ctx, &stillskyv1.MirrorServiceDescribeRequest{})
	if err != nil {
		t.Fatal(err)
	}
	if md.GetMirrorKind() != stillskyv1.MirrorKind_MIRROR_KIND_TIP_TILT || md.GetActuatorCount() != 2 || md.GetStrokeRad() != 1e-5 || md.GetCommandUnit() != "rad" || md.GetProtocolVersion() != 2 {
		t.Fatalf("tip-tilt mirror describes %v", md)
	}
	hd, err := camera.Describe(ctx, &stillskyv1.CameraServiceDescribeRequest{})
	if err != nil {
		t.Fatal(err)
	}
	dd, err := dmClient.Describe(ctx, &stillskyv1.MirrorServiceDescribeRequest{})
	if err != nil {
		t.Fatal(err)
	}
	if hd.GetSensorKind() != stillskyv1.SensorKind_SENSOR_KIND_SHACK_HARTMANN || dd.GetMirrorKind() != stillskyv1.MirrorKind_MIRROR_KIND_DEFORMABLE {
		t.Fatalf("laser camera kind %v, deformable mirror kind %v", hd.GetSensorKind(), dd.GetMirrorKind())
	}
	if st, err := ttCamera.StreamFrames(ctx, &stillskyv1.StreamFramesRequest{Chunks: 2}); err != nil {
		t.Fatal(err)
	} else if _, err := st.Recv(); status.Code(err) != codes.InvalidArgument {
		t.Fatalf("a chunked quad-cell stream: %v, want InvalidArgument", err)
	}
	if _, err := camera.SetSource(ctx, &stillskyv1.SetSourceRequest{Source: stillskyv1.Source_SOURCE_CALIBRATION}); err != nil {
		t.Fatal(err)
	}

	frames, err := camera.StreamFrames(ctx, &stillskyv1.StreamFramesRequest{})
	if err != nil {
		t.Fatal(err)
	}
	ttFrames, err := ttCamera.StreamFrames(ctx, &stillskyv1.StreamFramesRequest{})
	if err != nil {
		t.Fatal(err)
	}
	dm, err := dmClient.StreamCommands(ctx)
	if err != nil {
		t.Fatal(err)
	}
	ttCmds, err := ttMirror.StreamCommands(ctx)
	if err != nil {
		t.Fatal(err)
	}
	flat := make([]float32, dd.GetActuatorCount())
	const tx, ty = 1e-7, -0.5e-7
	var ttSeen []uint64
	for k := uint64(1); k <= 6; k++ {
		f, err := frames.Recv()
		if err != nil {
			t.Fatal(err)
		}
		if f.GetFrameNumber() != k {
			t.Fatalf("laser frame %d, want %d", f.GetFrameNumber(), k)
		}
		mx, my := 0.0, 0.0
		sl := f.GetSlopes()
		for i := 0; i < len(sl); i += 2 {
			mx += float64(sl[i])
			my += float64(sl[i+1])
		}
		mx, my = mx/float64(len(sl)/2), my/float64(len(sl)/2)
		wantX, wantY := 0.0, 0.0
		if k >= 3 {
			wantX, wantY = -tx, -ty
		}
		if math.Abs(mx-wantX) > 1e-3*tx || math.Abs(my-wantY) > 1e-3*tx {
			t.Errorf("laser frame %d: mean slopes (%.4g, %.4g), want (%.4g, %.4g)", k, mx, my, wantX, wantY)
		}
		if err := dm.Send(&stillskyv1.StreamCommandsRequest{FrameNumber: k, Values: flat}); err != nil {
			t.Fatal(err)
		}
		if _, err := dm.Recv(); err != nil {
			t.Fatal(err)
		}
		if k%2 != 0 {
			continue
		}
		g, err := ttFrames.Recv()
		if err != nil {
			t.Fatal(err)
		}
		j := g.GetFrameNumber()
		ttSeen = append(ttSeen, j)
		v := g.GetSlopes()
		if len(v) != 2 {
			t.Fatalf("tip-tilt frame %d has %d values", j, len(v))
		}
		// Frame 1 (laser frames 1–2) sees a flat tip-tilt mirror; frame 2
		// (laser frames 3–4) and 3 the command.
		wantX, wantY = 0, 0
		if j >= 2 {
			wantX, wantY = -tx, -ty
		}
		if math.Abs(float64(v[0])-wantX) > 2e-3*tx || math.Abs(float64(v[1])-wantY) > 2e-3*tx {
			t.Errorf("tip-tilt frame %d reads (%.4g, %.4g), want (%.4g, %.4g)", j, v[0], v[1], wantX, wantY)
		}
		// Noiseless on the calibration source: the flux is the photon budget.
		if f, want := float64(g.GetFluxElectrons()), s.TipTiltPhotons(); math.Abs(f-want) > 1e-6*want {
			t.Errorf("tip-tilt frame %d: flux %g e-, want %g", j, f, want)
		}
		cmd := []float32{0, 0}
		if j >= 1 {
			cmd = []float32{tx, ty}
		}
		if err := ttCmds.Send(&stillskyv1.StreamCommandsRequest{FrameNumber: j, Values: cmd}); err != nil {
			t.Fatal(err)
		}
		if ack, err := ttCmds.Recv(); err != nil || ack.GetFrameNumber() != j || ack.GetClipped() != 0 {
			t.Fatalf("tip-tilt acknowledgement %v, %v", ack, err)
		}
	}
	if len(ttSeen) != 3 || ttSeen[0] != 1 || ttSeen[2] != 3 {
		t.Errorf("tip-tilt frames %v, want 1, 2, 3", ttSeen)
	}
	// A command beyond the stroke is clipped and counted; a non-finite one
	// ends the stream with InvalidArgument.
	if err := ttCmds.Send(&stillskyv1.StreamCommandsRequest{FrameNumber: 4, Values: []float32{2e-5, 0}}); err != nil {
		t.Fatal(err)
	}
	if ack, err := ttCmds.Recv(); err != nil || ack.GetClipped() != 1 {
		t.Fatalf("clipped command acknowledged as %v, %v", ack, err)
	}
	if err := ttCmds.Send(&stillskyv1.StreamCommandsRequest{FrameNumber: 5, Values: []float32{float32(math.NaN()), 0}}); err != nil {
		t.Fatal(err)
	}
	if _, err := ttCmds.Recv(); status.Code(err) != codes.InvalidArgument {
		t.Errorf("non-finite tilt: %v, want InvalidArgument", err)
	}
}

// A scenario without a tip_tilt section has no tip-tilt devices to serve.
func TestTipTiltAddressRefused(t *testing.T) {
	s, err := scenario.Load("small")
	if err != nil {
		t.Fatal(err)
	}
	b, err := bench.NewServer(s, bench.Options{Lockstep: true})
	if err != nil {
		t.Fatal(err)
	}
	dir := t.TempDir()
	l, err := bench.Listen(bench.Addrs{Camera: "unix:" + filepath.Join(dir, "c.sock"), TipTilt: "unix:" + filepath.Join(dir, "t.sock")})
	if err != nil {
		t.Fatal(err)
	}
	if err := b.Serve(context.Background(), l); err == nil {
		t.Fatal("a tip-tilt address served for a scenario without tip_tilt")
	}
}

// The scenario's clouds dim the natural star as they dim the guide star: on
// the sky under a cloud of depth 0.5 the tip-tilt sensor's flux, averaged
// over 20 frames, is half the photon budget within 2% (Poisson noise of
// about 1 900 e- a frame: 0.5% on the mean).
func TestTipTiltFluxUnderCloud(t *testing.T) {
	s, err := scenario.Load("lgs")
	if err != nil {
		t.Fatal(err)
	}
	s.Clouds = scenario.Clouds{{Start: 0, Duration: 100, Depth: 0.5}}
	y, err := s.YAML()
	if err != nil {
		t.Fatal(err)
	}
	if s, err = scenario.Parse(y); err != nil {
		t.Fatalf("the clouded lgs scenario refused: %v", err)
	}
	b, err := bench.NewServer(s, bench.Options{Lockstep: true})
	if err != nil {
		t.Fatal(err)
	}
	dir := t.TempDir()
	cam, tt := "unix:"+filepath.Join(dir, "cam.sock"), "unix:"+filepath.Join(dir, "tt.sock")
	l, err := bench.Listen(bench.Addrs{Camera: cam, TipTilt: tt})
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- b.Serve(ctx, l) }()
	defer func() { cancel(); <-done }()
	connCam, err := rpc.Dial(cam, rpc.DeviceDialOptions()...)
	if err != nil {
		t.Fatal(err)
	}
	defer connCam.Close()
	connTT, err := rpc.Dial(tt, rpc.DeviceDialOptions()...)
	if err != nil {
		t.Fatal(err)
	}
	defer connTT.Close()
	ttFrames, err := stillskyv1.NewCameraServiceClient(connTT).StreamFrames(ctx, &stillskyv1.StreamFramesRequest{})
	if err != nil {
		t.Fatal(err)
	}
	frames, err := stillskyv1.NewCameraServiceClient(connCam).StreamFrames(ctx, &stillskyv1.StreamFramesRequest{})
	if err != nil {
		t.Fatal(err)
	}
	mc := stillskyv1.NewMirrorServiceClient(connCam)
	md, err := mc.Describe(ctx, &stillskyv1.MirrorServiceDescribeRequest{})
	if err != nil {
		t.Fatal(err)
	}
	dm, err := mc.StreamCommands(ctx)
	if err != nil {
		t.Fatal(err)
	}
	flat := make([]float32, md.GetActuatorCount())
	var sum float64
	const n = 20
	for k := uint64(1); k <= 2*n; k++ {
		if _, err := frames.Recv(); err != nil {
			t.Fatal(err)
		}
		if err := dm.Send(&stillskyv1.StreamCommandsRequest{FrameNumber: k, Values: flat, AckBatch: 64}); err != nil {
			t.Fatal(err)
		}
		if k%2 == 0 {
			g, err := ttFrames.Recv()
			if err != nil {
				t.Fatal(err)
			}
			sum += float64(g.GetFluxElectrons())
		}
	}
	if got, want := sum/n, 0.5*s.TipTiltPhotons(); math.Abs(got/want-1) > 0.02 {
		t.Errorf("tip-tilt flux under the cloud %.0f e-, want %.0f (half of %.0f)", got, want, s.TipTiltPhotons())
	}
}
