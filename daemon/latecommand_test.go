package daemon_test

import (
	"bytes"
	"context"
	"io"
	"math"
	"net"
	"testing"
	"time"

	"gonum.org/v1/gonum/mat"
	"google.golang.org/grpc"

	"stillsky/controller"
	"stillsky/daemon"
	"stillsky/internal/rpc"
	stillskyv1 "stillsky/proto/stillsky/v1"
	"stillsky/sim/bench"
	"stillsky/sim/scenario"
)

// slowMirror is a mirror link that delivers every command late: a proxy in
// front of the bench's mirror holding each command for delay before passing
// it on, and passing the bench's acknowledgements (with the bench's own
// receive times) back.
type slowMirror struct {
	stillskyv1.UnimplementedMirrorServiceServer
	up    stillskyv1.MirrorServiceClient
	delay time.Duration
}

func (m slowMirror) Describe(ctx context.Context, req *stillskyv1.MirrorServiceDescribeRequest) (*stillskyv1.MirrorServiceDescribeResponse, error) {
	return m.up.Describe(ctx, req)
}

func (m slowMirror) StreamCommands(s grpc.BidiStreamingServer[stillskyv1.StreamCommandsRequest, stillskyv1.StreamCommandsResponse]) error {
	up, err := m.up.StreamCommands(s.Context())
	if err != nil {
		return err
	}
	type held struct {
		due time.Time
		req *stillskyv1.StreamCommandsRequest
	}
	queue := make(chan held, 4096)
	errc := make(chan error, 3)
	go func() {
		for {
			req, err := s.Recv()
			if err != nil {
				errc <- err
				return
			}
			queue <- held{time.Now().Add(m.delay), req}
		}
	}()
	go func() {
		for h := range queue {
			time.Sleep(time.Until(h.due))
			if err := up.Send(h.req); err != nil {
				errc <- err
				return
			}
		}
	}()
	go func() {
		for {
			ack, err := up.Recv()
			if err != nil {
				errc <- err
				return
			}
			if err := s.Send(ack); err != nil {
				errc <- err
				return
			}
		}
	}()
	return <-errc
}

// trueInteraction pokes each actuator of a fresh copy of the bench, noise and
// turbulence off, and returns the slopes per metre of command (push–pull).
func trueInteraction(t *testing.T, scn *scenario.Scenario, amplitude float32) *mat.Dense {
	t.Helper()
	sys, err := bench.NewSystem(scn)
	if err != nil {
		t.Fatal(err)
	}
	sys.SetTurbulence(false)
	sys.SetNoise(false)
	ns, na := sys.NumSlopes(), sys.NumActuators()
	m := mat.NewDense(ns, na, nil)
	cmd := make([]float32, na)
	plus, minus := make([]float32, ns), make([]float32, ns)
	for k := range na {
		cmd[k] = amplitude
		sys.SetCommand(cmd)
		sys.Frame(plus)
		cmd[k] = -amplitude
		sys.SetCommand(cmd)
		sys.Frame(minus)
		cmd[k] = 0
		for i := range ns {
			m.Set(i, k, float64(plus[i]-minus[i])/(2*float64(amplitude)))
		}
	}
	return m
}

// TestFreeRunCalibrationLateCommands calibrates a free-running camera whose
// mirror link delivers every command 3.5 frame periods late, beyond the
// calibrator's settle frames (loop delay + 1). A calibrator that only counts
// frames would measure the first frames of each push block with the previous
// pull still on the mirror; the daemon counts a frame only once the mirror
// has acknowledged the block's command before that frame's exposure began.
// The measured interaction matrix must then match the one a poke-by-poke
// measurement of the bench gives, the definition of the interaction matrix
// (Roddier, Adaptive Optics in Astronomy, ch. 5; from memory), within 2 %.
func TestFreeRunCalibrationLateCommands(t *testing.T) {
	if testing.Short() {
		t.Skip("free-running calibration through a slow mirror link")
	}
	scn, err := scenario.Load("small")
	if err != nil {
		t.Fatal(err)
	}
	b, err := bench.NewServer(scn, bench.Options{})
	if err != nil {
		t.Fatal(err)
	}
	bl, err := bench.Listen(bench.Addrs{Camera: "127.0.0.1:0", Mirror: "127.0.0.1:0"})
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	benchDone := make(chan error, 1)
	go func() { benchDone <- b.Serve(ctx, bl) }()
	defer func() { cancel(); <-benchDone }()

	upConn, err := rpc.Dial(bl.Mirror.Addr().String(), rpc.DeviceDialOptions()...)
	if err != nil {
		t.Fatal(err)
	}
	defer upConn.Close()
	period := time.Duration(float64(time.Second) / scn.Loop.FrameRate)
	proxyLis, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	proxy := grpc.NewServer()
	stillskyv1.RegisterMirrorServiceServer(proxy, slowMirror{up: stillskyv1.NewMirrorServiceClient(upConn), delay: 7 * period / 2})
	go proxy.Serve(proxyLis)
	defer proxy.Stop()

	d, err := daemon.New(daemon.Config{CameraAddr: bl.Camera.Addr().String(), MirrorAddr: proxyLis.Addr().String(),
		ListenAddr: "127.0.0.1:0", MetricsAddr: "-"})
	if err != nil {
		t.Fatal(err)
	}
	loopDone := make(chan error, 1)
	go func() { loopDone <- d.Run(ctx) }()
	defer func() { cancel(); <-loopDone }()
	conn, err := rpc.Dial(d.ControlAddr())
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close()
	r := &loopRig{client: stillskyv1.NewControlServiceClient(conn)}
	r.waitFrames(t, 10)
	amplitude := float32(0.1 * scn.DM.Stroke) // the daemon's default poke: a tenth of the stroke
	r.calibrate(t)

	stream, err := r.client.SaveReconstructor(context.Background(), &stillskyv1.SaveReconstructorRequest{})
	if err != nil {
		t.Fatal(err)
	}
	var file bytes.Buffer
	for {
		c, err := stream.Recv()
		if err == io.EOF {
			break
		}
		if err != nil {
			t.Fatal(err)
		}
		file.Write(c.GetChunk())
	}
	rec, err := controller.ReadReconstructor(&file)
	if err != nil {
		t.Fatal(err)
	}
	want := trueInteraction(t, scn, amplitude)
	var diff mat.Dense
	diff.Sub(rec.Interaction, want)
	rel := mat.Norm(&diff, 2) / mat.Norm(want, 2)
	t.Logf("interaction matrix %d×%d measured through a link 3.5 frames late: relative error %.2e", want.RawMatrix().Rows, want.RawMatrix().Cols, rel)
	if !(rel < 0.02) || math.IsNaN(rel) {
		t.Errorf("measured interaction matrix off by %.1f %% (Frobenius norm, gonum mat.Norm), want < 2 %%", 100*rel)
	}
}
