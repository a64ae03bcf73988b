package daemon_test

import (
	"bytes"
	"context"
	"encoding/binary"
	"fmt"
	"io"
	"math"
	"math/rand/v2"
	"net"
	"net/http"
	"os"
	"os/exec"
	"path/filepath"
	"sync"
	"syscall"
	"testing"
	"time"

	"github.com/prometheus/common/expfmt"
	"github.com/prometheus/common/model"
	"gonum.org/v1/gonum/mat"
	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	"stillsky/controller"
	"stillsky/daemon"
	"stillsky/internal/monoclock"
	"stillsky/internal/rpc"
	stillskyv1 "stillsky/proto/stillsky/v1"
	"stillsky/sim/bench"
	"stillsky/sim/scenario"
)

// hostile is a camera and a mirror written for these tests: the camera sends
// exactly the messages a test scripts, however malformed, and the mirror records
// every command it receives. Both are real gRPC devices on their own loopback
// servers, so the daemon sees them exactly as it sees the bench.
type hostile struct {
	stillskyv1.UnimplementedCameraServiceServer
	slopes, actuators int
	frameRate         float64
	stroke            float64

	frames chan *stillskyv1.StreamFramesResponse

	mu       sync.Mutex
	commands int
	bad      []string // commands of the wrong length or with non-finite values
	lastCmd  uint64   // frame number of the newest command
	lastVals []float32
	history  [][]float32 // every command, in order of arrival
	arrived  chan struct{}
}

type hostileMirror struct {
	stillskyv1.UnimplementedMirrorServiceServer
	h *hostile
}

func (h *hostile) Describe(context.Context, *stillskyv1.CameraServiceDescribeRequest) (*stillskyv1.CameraServiceDescribeResponse, error) {
	return &stillskyv1.CameraServiceDescribeResponse{
		SlopeCount: uint32(h.slopes), FrameRateHz: h.frameRate, SlopeUnit: "rad", DelayFrames: 1,
		Description: "hostile test camera",
	}, nil
}

func (h *hostile) StreamFrames(_ *stillskyv1.StreamFramesRequest, s grpc.ServerStreamingServer[stillskyv1.StreamFramesResponse]) error {
	for {
		select {
		case <-s.Context().Done():
			return nil
		case f := <-h.frames:
			// Read out now: a scripted frame may wait in the test for a while, and
			// the daemon skips frames that reach it late.
			f.ReadoutEndNs = monoclock.Now()
			if err := s.Send(f); err != nil {
				return err
			}
		}
	}
}

func (m hostileMirror) Describe(context.Context, *stillskyv1.MirrorServiceDescribeRequest) (*stillskyv1.MirrorServiceDescribeResponse, error) {
	return &stillskyv1.MirrorServiceDescribeResponse{ActuatorCount: uint32(m.h.actuators), StrokeM: m.h.stroke, CommandUnit: "m"}, nil
}

func (m hostileMirror) StreamCommands(s grpc.BidiStreamingServer[stillskyv1.StreamCommandsRequest, stillskyv1.StreamCommandsResponse]) error {
	h := m.h
	for {
		req, err := s.Recv()
		if err != nil {
			return nil
		}
		received := monoclock.Now()
		v := req.GetValues()
		h.mu.Lock()
		h.commands++
		h.lastCmd = req.GetFrameNumber()
		h.lastVals = append(h.lastVals[:0], v...)
		h.history = append(h.history, append([]float32(nil), v...))
		if len(v) != h.actuators {
			h.bad = append(h.bad, fmt.Sprintf("frame %d: %d values", req.GetFrameNumber(), len(v)))
		}
		for i, x := range v {
			if math.IsNaN(float64(x)) || math.IsInf(float64(x), 0) {
				h.bad = append(h.bad, fmt.Sprintf("frame %d: value %d = %v", req.GetFrameNumber(), i, x))
				break
			}
		}
		h.mu.Unlock()
		select {
		case h.arrived <- struct{}{}:
		default:
		}
		if err := s.Send(&stillskyv1.StreamCommandsResponse{FrameNumber: req.GetFrameNumber(), ReceivedNs: received}); err != nil {
			return nil
		}
	}
}

// hostileRig is a hostile camera and mirror and a daemon connected to them.
type hostileRig struct {
	h              *hostile
	d              *daemon.Daemon
	client         stillskyv1.ControlServiceClient
	camSrv, mirSrv *grpc.Server
	mirAddr        string
	next           uint64 // next frame number a script should use
	rng            *rand.Rand
}

// startHostile starts the hostile devices and a daemon on them with cfg (the
// Control API on loopback unless cfg.ListenAddr is set); dial options, if any,
// are those of the rig's own Control API client. The camera describes 100 Hz, so
// that the daemon's time limits (a late frame is two periods old, a stale camera
// twenty) sit far above the pauses of a test on a loaded machine.
func startHostile(t *testing.T, cfg daemon.Config, dial ...grpc.DialOption) *hostileRig {
	t.Helper()
	return startHostileRate(t, cfg, 100, dial...)
}

// startHostileRate is startHostile with a camera that describes its frame rate as
// rate (Hz); the test sends frames at its own pace whatever the rate.
func startHostileRate(t *testing.T, cfg daemon.Config, rate float64, dial ...grpc.DialOption) *hostileRig {
	t.Helper()
	h := &hostile{slopes: 40, actuators: 12, frameRate: rate, stroke: 1e-6,
		frames: make(chan *stillskyv1.StreamFramesResponse), arrived: make(chan struct{}, 1)}
	camLis, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	mirLis, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	camSrv, mirSrv := grpc.NewServer(), grpc.NewServer()
	stillskyv1.RegisterCameraServiceServer(camSrv, h)
	stillskyv1.RegisterMirrorServiceServer(mirSrv, hostileMirror{h: h})
	go camSrv.Serve(camLis)
	go mirSrv.Serve(mirLis)
	cfg.CameraAddr, cfg.MirrorAddr = camLis.Addr().String(), mirLis.Addr().String()
	if cfg.ListenAddr == "" {
		cfg.ListenAddr = "127.0.0.1:0"
	}
	cfg.MetricsAddr = "127.0.0.1:0"
	d, err := daemon.New(cfg)
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- d.Run(ctx) }()
	conn, err := rpc.Dial(loopbackAddr(t, d.ControlAddr()), dial...)
	if err != nil {
		t.Fatal(err)
	}
	r := &hostileRig{h: h, d: d, client: stillskyv1.NewControlServiceClient(conn), camSrv: camSrv, mirSrv: mirSrv,
		mirAddr: cfg.MirrorAddr, next: 1, rng: rand.New(rand.NewPCG(7, 11))}
	t.Cleanup(func() {
		conn.Close()
		cancel()
		camSrv.Stop()
		r.mirSrv.Stop()
		select {
		case <-done:
		case <-time.After(10 * time.Second):
			t.Error("daemon did not stop within 10 s")
		}
	})
	deadline := time.Now().Add(10 * time.Second)
	for s := r.status(t); !s.GetCameraConnected() || !s.GetMirrorConnected(); s = r.status(t) {
		if time.Now().After(deadline) {
			t.Fatal("daemon did not connect to the hostile devices within 10 s")
		}
		time.Sleep(5 * time.Millisecond)
	}
	return r
}

// restartMirror serves the mirror again on its old address, as a device that
// was power-cycled.
func (r *hostileRig) restartMirror(t *testing.T) {
	t.Helper()
	lis, err := net.Listen("tcp", r.mirAddr)
	if err != nil {
		t.Fatal(err)
	}
	r.mirSrv = grpc.NewServer()
	stillskyv1.RegisterMirrorServiceServer(r.mirSrv, hostileMirror{h: r.h})
	go r.mirSrv.Serve(lis)
}

func (r *hostileRig) status(t *testing.T) *stillskyv1.GetStatusResponse {
	t.Helper()
	s, err := r.client.GetStatus(context.Background(), &stillskyv1.GetStatusRequest{})
	if err != nil {
		t.Fatal(err)
	}
	return s
}

// loopbackAddr returns 127.0.0.1 with the port of a listening address (which may
// be a wildcard such as [::]:port).
func loopbackAddr(t *testing.T, addr string) string {
	t.Helper()
	_, port, err := net.SplitHostPort(addr)
	if err != nil {
		t.Fatal(err)
	}
	return net.JoinHostPort("127.0.0.1", port)
}

// good returns a valid frame with the next frame number.
func (r *hostileRig) good() *stillskyv1.StreamFramesResponse {
	f := r.frame(r.next, r.h.slopes)
	r.next++
	return f
}

// take returns a frame of n finite slopes with the next frame number: a
// camera's frame counter advances whatever it sends.
func (r *hostileRig) take(n int) *stillskyv1.StreamFramesResponse {
	f := r.frame(r.next, n)
	r.next++
	return f
}

// frame returns a frame numbered num of n finite slopes (µrad-sized noise).
func (r *hostileRig) frame(num uint64, n int) *stillskyv1.StreamFramesResponse {
	s := make([]float32, n)
	for i := range s {
		s[i] = float32(1e-6 * r.rng.NormFloat64())
	}
	return &stillskyv1.StreamFramesResponse{FrameNumber: num, ReadoutEndNs: monoclock.Now(), ChunkCount: 1, Slopes: s}
}

func (r *hostileRig) send(t *testing.T, fs ...*stillskyv1.StreamFramesResponse) {
	t.Helper()
	for _, f := range fs {
		select {
		case r.h.frames <- f:
		case <-time.After(5 * time.Second):
			t.Fatalf("the daemon took no frame within 5 s")
		}
	}
}

// sync sends a good frame and waits until its command reached the mirror: the
// daemon handles frames in order, so everything sent before has been handled.
func (r *hostileRig) sync(t *testing.T) {
	t.Helper()
	r.answer(t, r.good())
}

// answer sends the valid frame f and waits until its command reached the mirror.
func (r *hostileRig) answer(t *testing.T, f *stillskyv1.StreamFramesResponse) {
	t.Helper()
	r.send(t, f)
	deadline := time.After(10 * time.Second)
	for {
		r.h.mu.Lock()
		got := r.h.lastCmd
		r.h.mu.Unlock()
		if got >= f.GetFrameNumber() {
			return
		}
		select {
		case <-r.h.arrived:
		case <-time.After(time.Millisecond):
		case <-deadline:
			s := r.status(t)
			t.Fatalf("no command for frame %d within 10 s; daemon at frame %d, %d frames, %d rejected, %d dropped, camera %v mirror %v, state %v",
				f.GetFrameNumber(), s.GetLastFrame(), s.GetFrames(), s.GetFramesRejected(), s.GetFramesDropped(),
				s.GetCameraConnected(), s.GetMirrorConnected(), s.GetState())
		}
	}
}

// pump sends good frames at about 1 kHz until the returned stop is called; for
// requests (close, open) that wait for the real-time goroutine's next frame.
func (r *hostileRig) pump(t *testing.T) (stop func()) {
	quit, done := make(chan struct{}), make(chan struct{})
	go func() {
		defer close(done)
		for {
			f := r.good()
			select {
			case <-quit:
				r.next-- // f was not sent
				return
			case r.h.frames <- f:
			}
			time.Sleep(time.Millisecond)
		}
	}()
	return func() { close(quit); <-done }
}

// loadMatrix uploads a reconstructor built from a random control matrix of the
// devices' geometry through the Control API.
func (r *hostileRig) loadMatrix(t *testing.T) *controller.Reconstructor {
	t.Helper()
	m := mat.NewDense(r.h.actuators, r.h.slopes, nil)
	for i := range r.h.actuators {
		for j := range r.h.slopes {
			m.Set(i, j, 0.01*r.rng.NormFloat64())
		}
	}
	rec, err := controller.ReconstructorFromMatrix(m, time.Date(2026, 3, 4, 5, 6, 7, 0, time.UTC))
	if err != nil {
		t.Fatal(err)
	}
	if err := uploadReconstructor(r.client, encode(t, rec)); err != nil {
		t.Fatalf("loading a valid reconstructor: %v", err)
	}
	return rec
}

// closeLoop closes the loop while frames flow, so that the real-time goroutine
// takes the request.
func (r *hostileRig) closeLoop(t *testing.T) {
	t.Helper()
	stop := r.pump(t)
	defer stop()
	if _, err := r.client.CloseLoop(context.Background(), &stillskyv1.CloseLoopRequest{}); err != nil {
		t.Fatalf("close: %v", err)
	}
}

func encode(t *testing.T, rec *controller.Reconstructor) []byte {
	t.Helper()
	var b bytes.Buffer
	if err := controller.WriteReconstructor(&b, rec); err != nil {
		t.Fatal(err)
	}
	return b.Bytes()
}

func uploadReconstructor(c stillskyv1.ControlServiceClient, file []byte) error {
	s, err := c.LoadReconstructor(context.Background())
	if err != nil {
		return err
	}
	if err := s.Send(&stillskyv1.LoadReconstructorRequest{Chunk: file}); err != nil && err != io.EOF {
		return err
	}
	_, err = s.CloseAndRecv()
	return err
}

// scrape reads /metrics at addr into "name" or "name{label}" → value, using the
// Prometheus text parser.
func scrape(t *testing.T, addr string) map[string]float64 {
	t.Helper()
	resp, err := http.Get("http://" + addr + "/metrics")
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	parser := expfmt.NewTextParser(model.UTF8Validation)
	fams, err := parser.TextToMetricFamilies(resp.Body)
	if err != nil {
		t.Fatalf("parsing /metrics: %v", err)
	}
	out := map[string]float64{}
	for name, f := range fams {
		for _, m := range f.GetMetric() {
			key := name
			for _, l := range m.GetLabel() {
				key += "{" + l.GetValue() + "}"
			}
			switch {
			case m.GetCounter() != nil:
				out[key] = m.GetCounter().GetValue()
			case m.GetGauge() != nil:
				out[key] = m.GetGauge().GetValue()
			}
		}
	}
	return out
}

// TestHostileCameraFrames feeds a closed loop every kind of malformed frame from
// a real (if hostile) camera. Each must be refused and counted under its reason in
// stillsky_frames_rejected_total (gaps under stillsky_frames_dropped_total), the
// mirror must never receive a wrong-length or non-finite command, and the loop
// must stay closed with the same gain and reconstructor (docs/hot-path.md, bad
// frames).
func TestHostileCameraFrames(t *testing.T) {
	// The scripted camera is silent between messages: no stale-camera hold here.
	r := startHostile(t, daemon.Config{Interlocks: daemon.Interlocks{StalePeriods: 1 << 20}})
	r.sync(t)
	rec := r.loadMatrix(t)
	r.sync(t)
	r.closeLoop(t)
	r.sync(t)
	before := r.status(t)
	if before.GetState() != stillskyv1.LoopState_LOOP_STATE_CLOSED {
		t.Fatalf("state %v after close, want closed", before.GetState())
	}
	n := r.h.slopes
	nanAt := func(v float32) *stillskyv1.StreamFramesResponse {
		f := r.take(n)
		f.Slopes[n/2] = v
		return f
	}
	last := func() uint64 { return r.next - 1 }
	cases := []struct {
		name   string
		frames func() []*stillskyv1.StreamFramesResponse
		reason string // label of stillsky_frames_rejected_total, or "dropped"
		count  float64
	}{
		{"one slope too many", func() []*stillskyv1.StreamFramesResponse {
			return []*stillskyv1.StreamFramesResponse{r.take(n + 1)}
		}, "length", 1},
		{"twice the slopes", func() []*stillskyv1.StreamFramesResponse {
			return []*stillskyv1.StreamFramesResponse{r.take(2 * n)}
		}, "length", 1},
		{"no slopes", func() []*stillskyv1.StreamFramesResponse {
			return []*stillskyv1.StreamFramesResponse{r.take(0)}
		}, "length", 1},
		{"offset past the start", func() []*stillskyv1.StreamFramesResponse {
			f := r.take(n - 3)
			f.Offset = 3
			return []*stillskyv1.StreamFramesResponse{f}
		}, "length", 1},
		// A frame's counter advances whatever it sends (see TestIncompleteFrameNotDropped).
		{"one slope short", func() []*stillskyv1.StreamFramesResponse {
			return []*stillskyv1.StreamFramesResponse{r.take(n - 1)}
		}, "length", 1},
		{"second chunk from another frame", func() []*stillskyv1.StreamFramesResponse {
			a := r.take(n - 5)
			a.ChunkCount = 2
			b := r.take(5)
			b.ChunkIndex, b.ChunkCount, b.Offset = 1, 2, uint32(n-5)
			return []*stillskyv1.StreamFramesResponse{a, b}
		}, "out_of_order", 1},
		{"NaN", func() []*stillskyv1.StreamFramesResponse {
			return []*stillskyv1.StreamFramesResponse{nanAt(float32(math.NaN()))}
		}, "nonfinite", 1},
		{"+Inf", func() []*stillskyv1.StreamFramesResponse {
			return []*stillskyv1.StreamFramesResponse{nanAt(float32(math.Inf(1)))}
		}, "nonfinite", 1},
		{"-Inf", func() []*stillskyv1.StreamFramesResponse {
			return []*stillskyv1.StreamFramesResponse{nanAt(float32(math.Inf(-1)))}
		}, "nonfinite", 1},
		{"duplicate", func() []*stillskyv1.StreamFramesResponse {
			return []*stillskyv1.StreamFramesResponse{r.frame(last(), n)}
		}, "duplicate", 1},
		{"out of order", func() []*stillskyv1.StreamFramesResponse {
			return []*stillskyv1.StreamFramesResponse{r.frame(last()-3, n), r.frame(last()-1, n)}
		}, "out_of_order", 2},
		{"gap of five", func() []*stillskyv1.StreamFramesResponse {
			r.next += 5
			return []*stillskyv1.StreamFramesResponse{r.good()}
		}, "dropped", 5},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			m0, s0 := scrape(t, r.d.MetricsAddr()), r.status(t)
			r.send(t, c.frames()...)
			r.sync(t)
			m1, s1 := scrape(t, r.d.MetricsAddr()), r.status(t)
			if c.reason == "dropped" {
				if got := m1["stillsky_frames_dropped_total"] - m0["stillsky_frames_dropped_total"]; got != c.count {
					t.Errorf("stillsky_frames_dropped_total rose by %g, want %g", got, c.count)
				}
				if got := s1.GetFramesDropped() - s0.GetFramesDropped(); float64(got) != c.count {
					t.Errorf("status frames_dropped rose by %d, want %g", got, c.count)
				}
				return
			}
			key := "stillsky_frames_rejected_total{" + c.reason + "}"
			if got := m1[key] - m0[key]; got != c.count {
				t.Errorf("%s rose by %g, want %g", key, got, c.count)
			}
			if got := s1.GetFramesRejected() - s0.GetFramesRejected(); float64(got) != c.count {
				t.Errorf("status frames_rejected rose by %d, want %g", got, c.count)
			}
			if got := s1.GetFramesDropped() - s0.GetFramesDropped(); got != 0 {
				t.Errorf("a refused frame counted %d frames as dropped", got)
			}
		})
	}
	after := r.status(t)
	if after.GetState() != stillskyv1.LoopState_LOOP_STATE_CLOSED || after.GetGain() != before.GetGain() ||
		after.GetReconstructor().GetCreatedUnix() != rec.Created.Unix() || after.GetInterlockTrips() != 0 {
		t.Errorf("bad frames changed the running state: %v gain %g created %d trips %d",
			after.GetState(), after.GetGain(), after.GetReconstructor().GetCreatedUnix(), after.GetInterlockTrips())
	}
	r.h.mu.Lock()
	defer r.h.mu.Unlock()
	if len(r.h.bad) > 0 {
		t.Errorf("the mirror received %d malformed commands, first %s", len(r.h.bad), r.h.bad[0])
	}
	t.Logf("%d commands reached the mirror, all of %d finite values", r.h.commands, r.h.actuators)
}

// TestHostileCameraStrayChunk sends a message that claims to be the second chunk
// of a frame whose first chunk never came. It must be refused and counted, so
// that a camera losing the start of its frames shows in
// stillsky_frames_rejected_total.
func TestHostileCameraStrayChunk(t *testing.T) {
	r := startHostile(t, daemon.Config{Interlocks: daemon.Interlocks{StalePeriods: 1 << 20}})
	r.sync(t)
	s0 := r.status(t)
	f := r.frame(r.next, r.h.slopes)
	f.ChunkIndex, f.ChunkCount = 1, 2
	r.next++
	r.send(t, f)
	r.sync(t)
	if got := r.status(t).GetFramesRejected() - s0.GetFramesRejected(); got != 1 {
		t.Errorf("frames_rejected rose by %d, want 1", got)
	}
}

// TestRejectedFrameNotDropped sends a NaN frame k followed by a good frame k+1.
// The camera lost nothing, so frame k must count as rejected only, not also as
// a gap under stillsky_frames_dropped_total.
func TestRejectedFrameNotDropped(t *testing.T) {
	r := startHostile(t, daemon.Config{Interlocks: daemon.Interlocks{StalePeriods: 1 << 20}})
	r.sync(t)
	s0 := r.status(t)
	f := r.good()
	f.Slopes[0] = float32(math.NaN())
	r.send(t, f)
	r.sync(t)
	s1 := r.status(t)
	if d, j := s1.GetFramesDropped()-s0.GetFramesDropped(), s1.GetFramesRejected()-s0.GetFramesRejected(); d != 0 || j != 1 {
		t.Errorf("one NaN frame: dropped +%d, rejected +%d; want +0 and +1", d, j)
	}
}

// TestIncompleteFrameNotDropped sends frames that end early, each followed by
// the camera's next frame number: a whole-frame message one slope short, and a
// first chunk whose second chunk carries the next frame's number. The camera
// lost nothing it did not send, so every frame number must be accounted once:
// refused frames under stillsky_frames_rejected_total, none as a gap under
// stillsky_frames_dropped_total.
func TestIncompleteFrameNotDropped(t *testing.T) {
	r := startHostile(t, daemon.Config{Interlocks: daemon.Interlocks{StalePeriods: 1 << 20}})
	r.sync(t)
	n := r.h.slopes
	for _, c := range []struct {
		name   string
		frames func() []*stillskyv1.StreamFramesResponse
	}{
		{"one slope short", func() []*stillskyv1.StreamFramesResponse { return []*stillskyv1.StreamFramesResponse{r.take(n - 1)} }},
		{"second chunk from another frame", func() []*stillskyv1.StreamFramesResponse {
			a := r.take(n - 5)
			a.ChunkCount = 2
			b := r.take(5)
			b.ChunkIndex, b.ChunkCount, b.Offset = 1, 2, uint32(n-5)
			return []*stillskyv1.StreamFramesResponse{a, b}
		}},
	} {
		t.Run(c.name, func(t *testing.T) {
			s0 := r.status(t)
			fs := c.frames()
			r.send(t, fs...)
			r.sync(t)
			s1 := r.status(t)
			numbers := fs[len(fs)-1].GetFrameNumber() - fs[0].GetFrameNumber() + 1
			rej, drop := s1.GetFramesRejected()-s0.GetFramesRejected(), s1.GetFramesDropped()-s0.GetFramesDropped()
			if drop != 0 || rej < 1 || rej > numbers {
				t.Errorf("%s: rejected +%d, dropped +%d for %d frame numbers; want 1..%d rejected, none dropped", c.name, rej, drop, numbers, numbers)
			}
		})
	}
}

// TestBadControlRequests sends refused Control API requests to a closed loop:
// each gets InvalidArgument or FailedPrecondition with a message, is counted
// nowhere as a success, and leaves state, gain, leak and reconstructor as they were.
func TestBadControlRequests(t *testing.T) {
	r := startHostile(t, daemon.Config{Interlocks: daemon.Interlocks{StalePeriods: 1 << 20}})
	r.sync(t)
	rec := r.loadMatrix(t)
	r.closeLoop(t)
	ctx := context.Background()
	valid := encode(t, rec)

	wrongSize := func(ns, na int) []byte {
		m := mat.NewDense(na, ns, nil)
		m.Set(0, 0, 1)
		w, err := controller.ReconstructorFromMatrix(m, time.Now())
		if err != nil {
			t.Fatal(err)
		}
		return encode(t, w)
	}
	// The primary data unit starts at the first 2880-byte block after the END
	// card (FITS Standard 4.0 §3.3.1 and §4.4.1); its first value is R(0, 0), a
	// big-endian IEEE 754 double (§5.3).
	withValue := func(v float64) []byte {
		b := bytes.Clone(valid)
		end := -1
		for i := 0; i+80 <= len(b); i += 80 {
			if string(b[i:i+8]) == "END     " {
				end = i
				break
			}
		}
		if end < 0 {
			t.Fatal("no END card in the written file")
		}
		data := (end/2880 + 1) * 2880
		binary.BigEndian.PutUint64(b[data:], math.Float64bits(v))
		return b
	}
	corrupt := bytes.Clone(valid)
	copy(corrupt[80*3:], "NAXIS1  =                  -40")

	calibrate := func(req *stillskyv1.CalibrateRequest) error {
		s, err := r.client.Calibrate(ctx, req)
		if err != nil {
			return err
		}
		_, err = s.Recv()
		return err
	}
	cases := []struct {
		name string
		call func() error
		code codes.Code
	}{
		{"gain 2 (the stability bound)", func() error { _, err := r.client.SetGain(ctx, &stillskyv1.SetGainRequest{Gain: 2}); return err }, codes.InvalidArgument},
		{"gain +Inf", func() error {
			_, err := r.client.SetGain(ctx, &stillskyv1.SetGainRequest{Gain: math.Inf(1)})
			return err
		}, codes.InvalidArgument},
		{"gain NaN", func() error {
			_, err := r.client.SetGain(ctx, &stillskyv1.SetGainRequest{Gain: math.NaN()})
			return err
		}, codes.InvalidArgument},
		{"gain -1e-300", func() error {
			_, err := r.client.SetGain(ctx, &stillskyv1.SetGainRequest{Gain: -1e-300})
			return err
		}, codes.InvalidArgument},
		{"leak NaN", func() error {
			_, err := r.client.SetLeak(ctx, &stillskyv1.SetLeakRequest{Leak: math.NaN()})
			return err
		}, codes.InvalidArgument},
		{"leak 1", func() error { _, err := r.client.SetLeak(ctx, &stillskyv1.SetLeakRequest{Leak: 1}); return err }, codes.InvalidArgument},
		{"modal gains on a matrix reconstructor", func() error {
			_, err := r.client.SetModalGains(ctx, &stillskyv1.SetModalGainsRequest{Gains: []float64{1}})
			return err
		}, codes.InvalidArgument},
		{"reconstructor with one slope too many", func() error { return uploadReconstructor(r.client, wrongSize(r.h.slopes+1, r.h.actuators)) }, codes.InvalidArgument},
		{"reconstructor with one actuator too few", func() error { return uploadReconstructor(r.client, wrongSize(r.h.slopes, r.h.actuators-1)) }, codes.InvalidArgument},
		{"reconstructor with a NaN", func() error { return uploadReconstructor(r.client, withValue(math.NaN())) }, codes.InvalidArgument},
		{"reconstructor with an Inf", func() error { return uploadReconstructor(r.client, withValue(math.Inf(-1))) }, codes.InvalidArgument},
		{"reconstructor truncated in the data", func() error { return uploadReconstructor(r.client, valid[:len(valid)-2880]) }, codes.InvalidArgument},
		{"reconstructor truncated in the header", func() error { return uploadReconstructor(r.client, valid[:1000]) }, codes.InvalidArgument},
		{"reconstructor with a corrupt axis", func() error { return uploadReconstructor(r.client, corrupt) }, codes.InvalidArgument},
		{"empty reconstructor", func() error { return uploadReconstructor(r.client, nil) }, codes.InvalidArgument},
		{"hold while closed is fine, calibrate while closed is not", func() error { return calibrate(&stillskyv1.CalibrateRequest{}) }, codes.FailedPrecondition},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			before := r.status(t)
			err := c.call()
			if status.Code(err) != c.code || status.Convert(err).Message() == "" {
				t.Errorf("%s: %v, want %v with a message", c.name, err, c.code)
			}
			r.sync(t)
			after := r.status(t)
			if after.GetState() != before.GetState() || after.GetGain() != before.GetGain() || after.GetLeak() != before.GetLeak() ||
				after.GetReconstructor().GetCreatedUnix() != rec.Created.Unix() || after.GetReconstructor().GetSlopeCount() != uint32(r.h.slopes) {
				t.Errorf("%s changed the state: %v/%g/%g/%d → %v/%g/%g/%d", c.name,
					before.GetState(), before.GetGain(), before.GetLeak(), before.GetReconstructor().GetCreatedUnix(),
					after.GetState(), after.GetGain(), after.GetLeak(), after.GetReconstructor().GetCreatedUnix())
			}
		})
	}
	r.h.mu.Lock()
	defer r.h.mu.Unlock()
	if len(r.h.bad) > 0 {
		t.Errorf("the mirror received %d malformed commands, first %s", len(r.h.bad), r.h.bad[0])
	}
}

// benchProcess is a bench serving on fixed addresses that a test can stop and
// start again, as a power-cycled device.
type benchProcess struct {
	addrs  bench.Addrs
	cancel context.CancelFunc
	done   chan error
}

func (p *benchProcess) start(t *testing.T, name string, opt bench.Options) {
	t.Helper()
	scn, err := scenario.Load(name)
	if err != nil {
		t.Fatal(err)
	}
	p.startScenario(t, scn, opt)
}

func (p *benchProcess) startScenario(t *testing.T, scn *scenario.Scenario, opt bench.Options) {
	t.Helper()
	b, err := bench.NewServer(scn, opt)
	if err != nil {
		t.Fatal(err)
	}
	var bl *bench.Listeners
	// The old sockets may linger for a moment after Serve returned.
	for i := 0; ; i++ {
		if bl, err = bench.Listen(p.addrs); err == nil {
			break
		}
		if i == 100 {
			t.Fatal(err)
		}
		time.Sleep(20 * time.Millisecond)
	}
	p.addrs = bench.Addrs{Camera: bl.Camera.Addr().String(), Mirror: bl.Mirror.Addr().String()}
	ctx, cancel := context.WithCancel(context.Background())
	p.cancel, p.done = cancel, make(chan error, 1)
	go func() { p.done <- b.Serve(ctx, bl) }()
}

func (p *benchProcess) stop(t *testing.T) {
	t.Helper()
	p.cancel()
	select {
	case err := <-p.done:
		if err != nil {
			t.Errorf("bench: %v", err)
		}
	case <-time.After(10 * time.Second):
		t.Fatal("bench did not stop within 10 s")
	}
}

// TestBenchRestart kills the bench under a closed loop and starts a new one on
// the same addresses. The loop must open when the devices go, the daemon must
// reconnect by itself (with backoff) and the loop must stay open until a client
// closes it again.
func TestBenchRestart(t *testing.T) {
	p := &benchProcess{addrs: bench.Addrs{Camera: "127.0.0.1:0", Mirror: "127.0.0.1:0"}}
	opt := bench.Options{Lockstep: true}
	p.start(t, "small", opt)
	t.Cleanup(func() { p.cancel() })
	d, err := daemon.New(daemon.Config{CameraAddr: p.addrs.Camera, MirrorAddr: p.addrs.Mirror, ListenAddr: "127.0.0.1:0", MetricsAddr: "-"})
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- d.Run(ctx) }()
	t.Cleanup(func() {
		cancel()
		<-done
	})
	conn, err := rpc.Dial(d.ControlAddr())
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close()
	r := &loopRig{d: d, client: stillskyv1.NewControlServiceClient(conn), conn: conn}
	r.waitFrames(t, 10)
	r.calibrate(t)
	if _, err := r.client.CloseLoop(context.Background(), &stillskyv1.CloseLoopRequest{}); err != nil {
		t.Fatal(err)
	}
	r.waitFrames(t, 50)

	p.stop(t)
	deadline := time.Now().Add(5 * time.Second)
	for s := r.status(t); s.GetCameraConnected() || s.GetState() != stillskyv1.LoopState_LOOP_STATE_OPEN; s = r.status(t) {
		if time.Now().After(deadline) {
			t.Fatalf("5 s after the bench died: camera connected %v, state %v; want false, open", s.GetCameraConnected(), s.GetState())
		}
		time.Sleep(time.Millisecond)
	}
	// Down for a while, so the daemon's retries back off.
	time.Sleep(1500 * time.Millisecond)
	before := r.status(t).GetFrames()
	p.start(t, "small", opt)
	back := time.Now()
	s := r.waitFrames(t, 20)
	reconnect := time.Since(back)
	// Backoff doubles from 100 ms to at most 5 s (daemon.go), so the new bench is
	// found within the current backoff step: after 1.5 s down, under 2 s.
	t.Logf("reconnected and 20 frames received %v after the bench restarted", reconnect.Round(time.Millisecond))
	if reconnect > 5*time.Second {
		t.Errorf("reconnect took %v, want under the 5 s backoff cap", reconnect)
	}
	if s.GetState() != stillskyv1.LoopState_LOOP_STATE_OPEN || s.GetFrames() <= before {
		t.Errorf("after the restart: state %v, frames %d → %d; want open and counting", s.GetState(), before, s.GetFrames())
	}
	if s.GetReconstructor() == nil {
		t.Error("the reconstructor was lost with the bench")
	}
	if _, err := r.client.CloseLoop(context.Background(), &stillskyv1.CloseLoopRequest{}); err != nil {
		t.Fatalf("closing after the restart: %v", err)
	}
	if s := r.waitFrames(t, 20); s.GetState() != stillskyv1.LoopState_LOOP_STATE_CLOSED {
		t.Errorf("state %v after closing on the new bench, want closed", s.GetState())
	}
}

// TestKillDuringCalibration runs the real binary: `stillsky sim` and `stillsky
// loop --state-dir`, as separate processes on unix sockets. It sets a gain,
// calibrates once to the end, starts a second, slower calibration and kills the
// loop with SIGKILL halfway. The restarted loop must come back with the first
// reconstructor (same creation time and modes) and the gain, and the committed
// file must be byte for byte the one written by the first calibration.
func TestKillDuringCalibration(t *testing.T) {
	if testing.Short() {
		t.Skip("builds the binary and runs two processes")
	}
	dir, err := os.MkdirTemp("", "ss7") // short: unix socket paths are limited to 108 bytes
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { os.RemoveAll(dir) })
	bin := filepath.Join(dir, "stillsky")
	if out, err := exec.Command("go", "build", "-o", bin, "stillsky/cmd/stillsky").CombinedOutput(); err != nil {
		t.Fatalf("go build: %v\n%s", err, out)
	}
	state := filepath.Join(dir, "state")
	if err := os.Mkdir(state, 0o755); err != nil {
		t.Fatal(err)
	}
	cam, mir, ctlAddr := "unix:"+filepath.Join(dir, "cam"), "unix:"+filepath.Join(dir, "mir"), "unix:"+filepath.Join(dir, "ctl")
	start := func(name string, args ...string) *exec.Cmd {
		t.Helper()
		cmd := exec.Command(bin, args...)
		logf, err := os.Create(filepath.Join(dir, name+".log"))
		if err != nil {
			t.Fatal(err)
		}
		cmd.Stdout, cmd.Stderr = logf, logf
		if err := cmd.Start(); err != nil {
			t.Fatal(err)
		}
		t.Cleanup(func() {
			cmd.Process.Kill()
			cmd.Wait()
			logf.Close()
			if t.Failed() {
				b, _ := os.ReadFile(logf.Name())
				t.Logf("%s log:\n%s", name, b)
			}
		})
		return cmd
	}
	start("sim", "sim", "--scenario", "small", "--camera", cam, "--mirror", mir, "--metrics", "")
	loopArgs := []string{"loop", "--camera", cam, "--mirror", mir, "--listen", ctlAddr, "--metrics", "-", "--state-dir", state}
	loop := start("loop", loopArgs...)
	conn, err := rpc.Dial(ctlAddr)
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close()
	r := &loopRig{client: stillskyv1.NewControlServiceClient(conn), conn: conn}
	waitUp := func() {
		t.Helper()
		deadline := time.Now().Add(30 * time.Second)
		for {
			s, err := r.client.GetStatus(context.Background(), &stillskyv1.GetStatusRequest{})
			if err == nil && s.GetCameraConnected() && s.GetMirrorConnected() && s.GetFrames() > 10 {
				return
			}
			if time.Now().After(deadline) {
				t.Fatalf("loop not running with frames 30 s after start: %v", err)
			}
			time.Sleep(20 * time.Millisecond)
		}
	}
	waitUp()
	if _, err := r.client.SetGain(context.Background(), &stillskyv1.SetGainRequest{Gain: 0.3}); err != nil {
		t.Fatal(err)
	}
	r.calibrate(t)
	first := r.status(t).GetReconstructor()
	committed, err := os.ReadFile(filepath.Join(state, "reconstructor.fits"))
	if err != nil {
		t.Fatalf("no committed reconstructor after a calibration: %v", err)
	}
	time.Sleep(1100 * time.Millisecond) // a second calibration would carry a later creation second

	// Fifty frames per pattern make the second calibration last tens of seconds.
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	cal, err := r.client.Calibrate(ctx, &stillskyv1.CalibrateRequest{FramesPerPattern: 50})
	if err != nil {
		t.Fatal(err)
	}
	for {
		m, err := cal.Recv()
		if err != nil {
			t.Fatalf("second calibration: %v", err)
		}
		if m.GetDone() > 0 {
			t.Logf("killing the loop at %d of %d calibration frames", m.GetDone(), m.GetTotal())
			break
		}
	}
	if err := loop.Process.Signal(syscall.SIGKILL); err != nil {
		t.Fatal(err)
	}
	loop.Wait()

	got, err := os.ReadFile(filepath.Join(state, "reconstructor.fits"))
	if err != nil || !bytes.Equal(got, committed) {
		t.Fatalf("committed reconstructor changed by the killed calibration (%v; %d → %d bytes)", err, len(committed), len(got))
	}
	if _, err := controller.LoadReconstructor(filepath.Join(state, "reconstructor.fits")); err != nil {
		t.Errorf("committed reconstructor does not read back: %v", err)
	}
	entries, _ := os.ReadDir(state)
	var names []string
	for _, e := range entries {
		names = append(names, e.Name())
	}
	t.Logf("state directory after the kill: %v", names)

	start("loop2", loopArgs...)
	waitUp()
	deadline := time.Now().Add(10 * time.Second)
	s := r.status(t)
	for s.GetReconstructor() == nil && time.Now().Before(deadline) {
		time.Sleep(20 * time.Millisecond)
		s = r.status(t)
	}
	rec := s.GetReconstructor()
	if rec.GetCreatedUnix() != first.GetCreatedUnix() || rec.GetModesKept() != first.GetModesKept() || rec.GetModesKept() == 0 {
		t.Errorf("restored reconstructor created %d with %d modes; want the first, created %d with %d modes",
			rec.GetCreatedUnix(), rec.GetModesKept(), first.GetCreatedUnix(), first.GetModesKept())
	}
	if s.GetGain() != 0.3 {
		t.Errorf("restored gain %g, want 0.3", s.GetGain())
	}
	if s.GetState() != stillskyv1.LoopState_LOOP_STATE_OPEN {
		t.Errorf("restarted loop is %v, want open", s.GetState())
	}
}

// TestBadCalibrationRequests asks for calibrations with settings that can never
// give a reconstructor. Each must be refused with InvalidArgument before a
// single poke, leaving the loop open and the counters of finished calibrations
// alone. (The bounds are those BuildReconstructor and NewCalibrator enforce.)
func TestBadCalibrationRequests(t *testing.T) {
	r := startRig(t, "small", bench.Options{Lockstep: true}, daemon.Config{})
	for _, c := range []struct {
		name string
		req  *stillskyv1.CalibrateRequest
	}{
		{"amplitude NaN", &stillskyv1.CalibrateRequest{AmplitudeM: math.NaN()}},
		{"amplitude negative", &stillskyv1.CalibrateRequest{AmplitudeM: -1e-7}},
		{"amplitude beyond the stroke", &stillskyv1.CalibrateRequest{AmplitudeM: 1}},
		{"tikhonov negative", &stillskyv1.CalibrateRequest{Tikhonov: -0.1}},
		{"tikhonov NaN", &stillskyv1.CalibrateRequest{Tikhonov: math.NaN()}},
		{"max condition negative", &stillskyv1.CalibrateRequest{MaxCondition: -1}},
	} {
		t.Run(c.name, func(t *testing.T) {
			before := scrape(t, r.d.MetricsAddr())
			start := time.Now()
			s, err := r.client.Calibrate(context.Background(), c.req)
			if err == nil {
				for {
					if _, err = s.Recv(); err != nil {
						break
					}
				}
			}
			if status.Code(err) != codes.InvalidArgument {
				t.Errorf("%s: %v after %v, want InvalidArgument", c.name, err, time.Since(start))
			}
			after := scrape(t, r.d.MetricsAddr())
			if st := r.status(t); st.GetState() != stillskyv1.LoopState_LOOP_STATE_OPEN || st.GetReconstructor() != nil {
				t.Errorf("%s: state %v, reconstructor %v; want open, none", c.name, st.GetState(), st.GetReconstructor())
			}
			if k := "stillsky_calibrations_total{ok}"; after[k] != before[k] {
				t.Errorf("%s: %s rose", c.name, k)
			}
		})
	}
}

// TestCalibrationSettingsCheckedFirst asks for calibrations whose reconstructor
// settings BuildReconstructor refuses (a condition cut below 1 or infinite, an
// infinite Tikhonov weight, an unknown basis, mirror modes with Tikhonov or
// beyond the eigen route's condition): they must be refused with InvalidArgument before
// the first poke, not with Internal after all of them.
func TestCalibrationSettingsCheckedFirst(t *testing.T) {
	r := startRig(t, "small", bench.Options{Lockstep: true}, daemon.Config{})
	for _, c := range []struct {
		name string
		req  *stillskyv1.CalibrateRequest
	}{
		{"max condition 0.5", &stillskyv1.CalibrateRequest{MaxCondition: 0.5}},
		{"max condition NaN", &stillskyv1.CalibrateRequest{MaxCondition: math.NaN()}},
		{"max condition +Inf", &stillskyv1.CalibrateRequest{MaxCondition: math.Inf(1)}},
		{"tikhonov +Inf", &stillskyv1.CalibrateRequest{Tikhonov: math.Inf(1)}},
		{"unknown basis", &stillskyv1.CalibrateRequest{Basis: "zernike"}},
		{"mirror basis with tikhonov", &stillskyv1.CalibrateRequest{Basis: "mirror", Tikhonov: 0.1}},
		{"mirror basis max condition 1e6", &stillskyv1.CalibrateRequest{Basis: "mirror", MaxCondition: 1e6}},
	} {
		t.Run(c.name, func(t *testing.T) {
			start := time.Now()
			s, err := r.client.Calibrate(context.Background(), c.req)
			pokes := uint32(0)
			if err == nil {
				for {
					var m *stillskyv1.CalibrateResponse
					if m, err = s.Recv(); err != nil {
						break
					}
					pokes = max(pokes, m.GetDone())
				}
			}
			if status.Code(err) != codes.InvalidArgument || pokes > 0 {
				t.Errorf("%s: %v after %d calibration frames (%v), want InvalidArgument before any", c.name, err, pokes, time.Since(start).Round(time.Millisecond))
			}
		})
	}
}

// TestCorruptStateDir starts the daemon on a state directory whose committed
// reconstructor was truncated (a disk fault; the daemon itself only ever renames
// complete files into place) next to valid settings. The daemon must start, run
// open without a reconstructor, and still restore the gain and leak.
func TestCorruptStateDir(t *testing.T) {
	state := t.TempDir()
	m := mat.NewDense(3, 4, []float64{1, 0, 0, 0, 0, 1, 0, 0, 0, 0, 1, 0})
	rec, err := controller.ReconstructorFromMatrix(m, time.Now())
	if err != nil {
		t.Fatal(err)
	}
	file := encode(t, rec)
	if err := os.WriteFile(filepath.Join(state, "reconstructor.fits"), file[:len(file)-100], 0o644); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(filepath.Join(state, "settings.json"), []byte(`{"gain":0.25,"leak":0.05}`), 0o644); err != nil {
		t.Fatal(err)
	}
	r := startRig(t, "small", bench.Options{Lockstep: true}, daemon.Config{StateDir: state})
	s := r.waitFrames(t, 20)
	if s.GetReconstructor() != nil || s.GetState() != stillskyv1.LoopState_LOOP_STATE_OPEN {
		t.Errorf("from a truncated file: reconstructor %v, state %v; want none, open", s.GetReconstructor(), s.GetState())
	}
	if s.GetGain() != 0.25 || s.GetLeak() != 0.05 {
		t.Errorf("settings restored as %g/%g, want 0.25/0.05", s.GetGain(), s.GetLeak())
	}
	if _, err := r.client.CloseLoop(context.Background(), &stillskyv1.CloseLoopRequest{}); status.Code(err) != codes.FailedPrecondition {
		t.Errorf("closing without a reconstructor: %v, want FailedPrecondition", err)
	}
}

// TestCameraCounterRestart lets the camera restart its frame counter in the
// middle of a stream (firmware reset, counter wrap). Every later frame is older
// than the last one accepted, so all are refused as out of order; the loop gets
// no usable frame and must at least hold (stale camera), not sit closed with the
// mirror frozen and the status saying all is well.
func TestCameraCounterRestart(t *testing.T) {
	r := startHostileRate(t, daemon.Config{Interlocks: daemon.Interlocks{StalePeriods: 20}}, 100)
	for range 500 {
		r.good() // the counter is at 501
	}
	r.sync(t)
	r.loadMatrix(t)
	r.closeLoop(t)
	r.next = 1
	start := time.Now()
	for time.Since(start) < time.Second {
		r.send(t, r.good())
		time.Sleep(time.Millisecond)
	}
	s := r.status(t)
	if trips := tripped(scrape(t, r.d.MetricsAddr()))["stale_camera"]; trips != 1 || s.GetState() == stillskyv1.LoopState_LOOP_STATE_CLOSED {
		t.Errorf("1 s after the counter restarted: %d frames refused, state %v, stale_camera trips %g; want hold, 1",
			s.GetFramesRejected(), s.GetState(), trips)
	}
}

// TestRefusedRequestsCounted checks the rule that bad input is counted
// in the metrics: refused Control API calls (here an invalid gain and a corrupt
// reconstructor file) must show in stillsky_control_requests_refused_total by
// method and gRPC code.
func TestRefusedRequestsCounted(t *testing.T) {
	r := startHostile(t, daemon.Config{Interlocks: daemon.Interlocks{StalePeriods: 1 << 20}})
	if _, err := r.client.SetGain(context.Background(), &stillskyv1.SetGainRequest{Gain: math.NaN()}); status.Code(err) != codes.InvalidArgument {
		t.Fatalf("SetGain NaN: %v", err)
	}
	if err := uploadReconstructor(r.client, []byte("SIMPLE  =                    T")); status.Code(err) != codes.InvalidArgument {
		t.Fatalf("corrupt reconstructor: %v", err)
	}
	m := scrape(t, r.d.MetricsAddr())
	for _, k := range []string{
		"stillsky_control_requests_refused_total{InvalidArgument}{SetGain}",
		"stillsky_control_requests_refused_total{InvalidArgument}{LoadReconstructor}",
	} {
		if m[k] != 1 {
			t.Errorf("%s = %g, want 1", k, m[k])
		}
	}
}

// TestBenchSlowConsumer reads the bench's camera stream slower than its frame
// rate, as a loop on an overloaded machine does, so that the bench loses frames.
// The frames that do arrive must be whole and in order. Run with -race, it also
// checks that the bench never refills a ring slot the camera stream is still
// encoding (it did, once frames were lost, while slots were picked by frame
// number).
func TestBenchSlowConsumer(t *testing.T) {
	p := &benchProcess{addrs: bench.Addrs{Camera: "127.0.0.1:0", Mirror: "127.0.0.1:0"}}
	p.start(t, "small", bench.Options{})
	t.Cleanup(func() { p.stop(t) })
	conn, err := rpc.Dial(p.addrs.Camera)
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close()
	cam := stillskyv1.NewCameraServiceClient(conn)
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	s, err := cam.StreamFrames(ctx, &stillskyv1.StreamFramesRequest{}, grpc.WaitForReady(true))
	if err != nil {
		t.Fatal(err)
	}
	var last uint64
	lost := uint64(0)
	for i := range 900 {
		if i%300 == 0 {
			// Stop reading until gRPC's flow-control window is full and the bench's
			// ring overflows.
			time.Sleep(time.Second)
		}
		m, err := s.Recv()
		if err != nil {
			t.Fatal(err)
		}
		if n := m.GetFrameNumber(); n <= last {
			t.Fatalf("frame %d after %d", n, last)
		} else if last != 0 {
			lost += n - last - 1
		}
		last = m.GetFrameNumber()
		for i, v := range m.GetSlopes() {
			if v-v != 0 {
				t.Fatalf("frame %d: slope %d = %v", last, i, v)
			}
		}
	}
	if lost == 0 {
		t.Fatal("the bench lost no frames: the consumer was not slow enough to test the ring")
	}
	t.Logf("%d frames lost by the bench while 900 were read", lost)
}
