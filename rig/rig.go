// Package rig runs the simulated bench and the loop daemon in one process, joined
// by real gRPC over TCP loopback or unix sockets, and drives the loop through its
// Control API: the set-up of the demo, the latency benchmark and the integration
// tests. With Config.Devices it runs only the loop, against devices already
// serving (a simulator in a process of its own).
//
// The contract: Start returns once every listener is open and the loop is
// running; every wait (WaitFrames, Calibrate) ends when its context does; Close
// stops the loop before the bench and reports the first failure of either. The
// rig changes no process-wide setting: GOMAXPROCS, the scheduler policy and the
// like are the command's to set.
package rig

import (
	"context"
	"errors"
	"fmt"
	"io"
	"math"
	"net"
	"net/http"
	"os"
	"path/filepath"
	"slices"
	"time"

	"google.golang.org/grpc"

	"stillsky/daemon"
	"stillsky/internal/rpc"
	stillskyv1 "stillsky/proto/stillsky/v1"
	"stillsky/sim/bench"
	"stillsky/sim/scenario"
)

// Config says what the rig runs. Zero values take the defaults.
type Config struct {
	// Scenario is the system the bench simulates; required unless Devices is set.
	Scenario *scenario.Scenario
	// Bench are the simulated bench's options.
	Bench bench.Options
	// Loop is the daemon's configuration. The rig sets the device addresses; the
	// Control API and the metrics listen on ports the system chooses (or, with
	// Unix, the Control API on a socket) unless ListenAddr or MetricsAddr is set;
	// ScienceWavelength defaults to the scenario's.
	Loop daemon.Config
	// Unix puts the device links and the Control API on unix sockets in a
	// temporary directory, instead of TCP loopback.
	Unix bool
	// BenchHTTP serves the bench's metrics and live view on a loopback port,
	// and points the loop's live view at it (unless Loop.BenchURL is set).
	BenchHTTP bool
	// Devices, if set, are the camera and mirror of a bench already serving; the
	// rig runs only the loop against them.
	Devices *Devices
}

// Devices are the dial addresses (host:port or unix:/path) of a camera and a
// mirror, and of the tip-tilt sensor and mirror ("" without them).
type Devices struct {
	Camera, Mirror string
	TipTilt        string
}

// Rig is a running bench and loop.
type Rig struct {
	// Bench is the simulated bench; nil with Config.Devices.
	Bench *bench.Server
	// Loop is the loop daemon.
	Loop *daemon.Daemon
	// Conn is the connection to the loop's Control API, Client its client.
	Conn   *grpc.ClientConn
	Client stillskyv1.ControlServiceClient
	// Devices are the dial addresses of the camera and the mirror.
	Devices Devices
	// ControlAddr is the dial address of the loop's Control API.
	ControlAddr string
	// BenchHTTPAddr is the host:port of the bench's metrics and live view, ""
	// without Config.BenchHTTP.
	BenchHTTPAddr string

	dir                   string
	stopBench, stopLoop   context.CancelFunc
	benchDone, loopDone   chan error
	loopStopped, released bool
	loopErr               error
}

// stopTimeout bounds the wait for the loop or the bench to stop.
const stopTimeout = 10 * time.Second

// Start starts the bench (unless c.Devices is set) and the loop. The rig's parts
// run until Close, or until ctx ends.
func Start(ctx context.Context, c Config) (*Rig, error) {
	if c.Devices == nil && c.Scenario == nil {
		return nil, errors.New("rig: a scenario or devices are required")
	}
	r := &Rig{}
	if err := r.start(ctx, c); err != nil {
		r.Close()
		return nil, err
	}
	return r, nil
}

func (r *Rig) start(ctx context.Context, c Config) (err error) {
	if c.Unix {
		if r.dir, err = os.MkdirTemp("", "stillsky-rig-"); err != nil {
			return err
		}
	}
	if c.Devices != nil {
		r.Devices = *c.Devices
	} else if err := r.startBench(ctx, c); err != nil {
		return err
	}

	cfg := c.Loop
	cfg.CameraAddr, cfg.MirrorAddr = r.Devices.Camera, r.Devices.Mirror
	if r.Devices.TipTilt != "" {
		// The tip-tilt loop on the bench's tip-tilt devices, with the
		// scenario's gains unless the configuration gives its own.
		tt := daemon.TipTiltConfig{}
		if cfg.TipTilt != nil {
			tt = *cfg.TipTilt
		}
		tt.CameraAddr, tt.MirrorAddr = r.Devices.TipTilt, r.Devices.TipTilt
		if s := c.Scenario; s != nil && s.TipTilt != nil {
			if tt.Gain == nil {
				g := s.TipTilt.Gain
				tt.Gain = &g
			}
			if tt.OffloadGain == 0 {
				tt.OffloadGain = s.TipTilt.OffloadGain
			}
		}
		cfg.TipTilt = &tt
	}
	if cfg.ListenAddr == "" {
		cfg.ListenAddr = r.addr("control")
	}
	if cfg.MetricsAddr == "" {
		cfg.MetricsAddr = "127.0.0.1:0"
	}
	if cfg.ScienceWavelength == 0 && c.Scenario != nil {
		cfg.ScienceWavelength = c.Scenario.Science.Wavelength
	}
	if cfg.BenchURL == "" && r.BenchHTTPAddr != "" {
		cfg.BenchURL = "http://" + r.BenchHTTPAddr
	}
	if r.Loop, err = daemon.New(cfg); err != nil {
		return err
	}
	var lctx context.Context
	lctx, r.stopLoop = context.WithCancel(ctx)
	r.loopDone = make(chan error, 1)
	go func() { r.loopDone <- r.Loop.Run(lctx) }()
	r.ControlAddr = dialAddr(cfg.ListenAddr, r.Loop.ControlAddr())
	if r.Conn, err = rpc.Dial(r.ControlAddr); err != nil {
		return err
	}
	r.Client = stillskyv1.NewControlServiceClient(r.Conn)
	return nil
}

// startBench serves the bench on the rig's addresses.
func (r *Rig) startBench(ctx context.Context, c Config) error {
	b, err := bench.NewServer(c.Scenario, c.Bench)
	if err != nil {
		return err
	}
	addrs := bench.Addrs{Camera: r.addr("camera"), Mirror: r.addr("mirror")}
	if c.Scenario.TipTilt != nil {
		addrs.TipTilt = r.addr("tiptilt")
	}
	if c.BenchHTTP {
		addrs.Metrics = "127.0.0.1:0"
	}
	l, err := bench.Listen(addrs)
	if err != nil {
		return err
	}
	r.Bench = b
	r.Devices = Devices{Camera: dialAddr(addrs.Camera, l.Camera.Addr().String()), Mirror: dialAddr(addrs.Mirror, l.Mirror.Addr().String())}
	if l.TipTilt != nil {
		r.Devices.TipTilt = dialAddr(addrs.TipTilt, l.TipTilt.Addr().String())
	}
	var extra []func(*http.ServeMux)
	if l.Metrics != nil {
		r.BenchHTTPAddr = l.Metrics.Addr().String()
		extra = append(extra, b.RegisterLiveView)
	}
	var bctx context.Context
	bctx, r.stopBench = context.WithCancel(ctx)
	r.benchDone = make(chan error, 1)
	go func() { r.benchDone <- b.Serve(bctx, l, extra...) }()
	return nil
}

// addr is where the rig listens for one of its parts.
func (r *Rig) addr(name string) string {
	if r.dir != "" {
		return "unix:" + filepath.Join(r.dir, name+".sock")
	}
	return "127.0.0.1:0"
}

// dialAddr is the address to dial a listener opened on addr, whose address is
// now bound.
func dialAddr(addr, bound string) string {
	if rpc.IsUnix(addr) {
		return addr
	}
	host, port, err := net.SplitHostPort(bound)
	if err != nil {
		return bound
	}
	if ip := net.ParseIP(host); ip != nil && ip.IsUnspecified() {
		host = "127.0.0.1"
	}
	return net.JoinHostPort(host, port)
}

// Status returns the loop's status.
func (r *Rig) Status(ctx context.Context) (*stillskyv1.GetStatusResponse, error) {
	return r.Client.GetStatus(ctx, &stillskyv1.GetStatusRequest{})
}

// WaitFrames waits until the loop has received n frames more than when called,
// with both devices connected, and returns the status then; see WaitFrames.
func (r *Rig) WaitFrames(ctx context.Context, n uint64) (*stillskyv1.GetStatusResponse, error) {
	return WaitFrames(ctx, r.Client, n)
}

// Calibrate calibrates the loop; see Calibrate.
func (r *Rig) Calibrate(ctx context.Context, req *stillskyv1.CalibrateRequest, progress func(*stillskyv1.CalibrateResponse)) (*stillskyv1.ReconstructorInfo, error) {
	return Calibrate(ctx, r.Client, req, progress)
}

// StopLoop stops the loop and waits for it, leaving the bench running; it
// returns the loop's error, if it failed.
func (r *Rig) StopLoop() error {
	if r.loopStopped || r.stopLoop == nil {
		return r.loopErr
	}
	r.loopStopped = true
	if r.Conn != nil {
		r.Conn.Close()
	}
	r.stopLoop()
	r.loopErr = wait("loop", r.loopDone)
	return r.loopErr
}

// Close stops the loop, then the bench, and removes the rig's sockets. It
// returns the first error of either, if one failed.
func (r *Rig) Close() error {
	if r.released {
		return nil
	}
	r.released = true
	err := r.StopLoop()
	if r.stopBench != nil {
		r.stopBench()
		if e := wait("bench", r.benchDone); err == nil {
			err = e
		}
	}
	if r.dir != "" {
		os.RemoveAll(r.dir)
	}
	return err
}

// wait waits for a part to stop; being stopped is no error.
func wait(part string, done <-chan error) error {
	select {
	case err := <-done:
		if errors.Is(err, context.Canceled) {
			return nil
		}
		if err != nil {
			return fmt.Errorf("rig: %s: %w", part, err)
		}
		return nil
	case <-time.After(stopTimeout):
		return fmt.Errorf("rig: the %s did not stop within %v", part, stopTimeout)
	}
}

// pollInterval is how often the waits ask the loop for its status.
const pollInterval = 5 * time.Millisecond

// WaitFrames waits until the loop behind c has received n frames more than when
// called, with both devices connected, and returns the status then. It gives up
// when ctx ends, saying how far it got.
func WaitFrames(ctx context.Context, c stillskyv1.ControlServiceClient, n uint64) (*stillskyv1.GetStatusResponse, error) {
	s, err := c.GetStatus(ctx, &stillskyv1.GetStatusRequest{})
	if err != nil {
		return nil, err
	}
	start, t := s.GetFrames(), time.NewTicker(pollInterval)
	defer t.Stop()
	for s.GetFrames() < start+n || !s.GetCameraConnected() || !s.GetMirrorConnected() {
		select {
		case <-ctx.Done():
		case <-t.C:
		}
		next, err := c.GetStatus(ctx, &stillskyv1.GetStatusRequest{})
		if cerr := ended(ctx); cerr != nil {
			return nil, fmt.Errorf("rig: %d of %d frames (camera connected %v, mirror connected %v): %w",
				s.GetFrames()-start, n, s.GetCameraConnected(), s.GetMirrorConnected(), cerr)
		}
		if err != nil {
			return nil, err
		}
		s = next
	}
	return s, nil
}

// WaitConnected waits until the loop behind c has both devices connected, and
// returns the status then; it needs no frame (a gated lockstep bench holds them).
func WaitConnected(ctx context.Context, c stillskyv1.ControlServiceClient) (*stillskyv1.GetStatusResponse, error) {
	t := time.NewTicker(pollInterval)
	defer t.Stop()
	for {
		s, err := c.GetStatus(ctx, &stillskyv1.GetStatusRequest{})
		if cerr := ended(ctx); cerr != nil {
			return nil, fmt.Errorf("rig: camera connected %v, mirror connected %v: %w", s.GetCameraConnected(), s.GetMirrorConnected(), cerr)
		}
		if err != nil {
			return nil, err
		}
		if s.GetCameraConnected() && s.GetMirrorConnected() {
			return s, nil
		}
		select {
		case <-ctx.Done():
		case <-t.C:
		}
	}
}

// ended returns ctx's error, or context.DeadlineExceeded once its deadline has
// passed: gRPC fails a call at the deadline, before the context's own timer
// may have fired.
func ended(ctx context.Context) error {
	if err := ctx.Err(); err != nil {
		return err
	}
	if d, ok := ctx.Deadline(); ok && !time.Now().Before(d) {
		return context.DeadlineExceeded
	}
	return nil
}

// Calibrate runs a calibration through the Control API behind c, handing each
// progress message to progress (if not nil), and returns the reconstructor the
// loop built. It gives up when ctx ends, which aborts the calibration.
func Calibrate(ctx context.Context, c stillskyv1.ControlServiceClient, req *stillskyv1.CalibrateRequest, progress func(*stillskyv1.CalibrateResponse)) (*stillskyv1.ReconstructorInfo, error) {
	stream, err := c.Calibrate(ctx, req)
	if err != nil {
		return nil, err
	}
	var info *stillskyv1.ReconstructorInfo
	for {
		m, err := stream.Recv()
		if err == io.EOF {
			if info == nil {
				return nil, errors.New("rig: the calibration ended without a reconstructor")
			}
			return info, nil
		}
		if err != nil {
			return nil, err
		}
		if progress != nil {
			progress(m)
		}
		if m.GetReconstructor() != nil {
			info = m.GetReconstructor()
		}
	}
}

// Quantiles are latency quantiles in microseconds, rounded to 0.1 µs: the form in
// which the demo's summary and the latency benchmark report them.
type Quantiles struct {
	P50  float64 `json:"p50"`
	P99  float64 `json:"p99"`
	P999 float64 `json:"p999"`
	Max  float64 `json:"max"`
}

// QuantilesOf returns the quantiles of latencies in nanoseconds, each the sample
// of rank round(p·(n−1)) in sorted order, as the daemon's status computes them.
func QuantilesOf(ns []int64) Quantiles {
	if len(ns) == 0 {
		return Quantiles{}
	}
	v := slices.Clone(ns)
	slices.Sort(v)
	q := func(p float64) float64 { return micro(float64(v[int(p*float64(len(v)-1)+0.5)]) * 1e-9) }
	return Quantiles{P50: q(0.5), P99: q(0.99), P999: q(0.999), Max: micro(float64(v[len(v)-1]) * 1e-9)}
}

// QuantilesFrom converts the daemon's latency summary (seconds).
func QuantilesFrom(l *stillskyv1.LatencySummary) Quantiles {
	return Quantiles{P50: micro(l.GetP50()), P99: micro(l.GetP99()), P999: micro(l.GetP999()), Max: micro(l.GetMax())}
}

// micro converts seconds to microseconds rounded to 0.1 µs.
func micro(s float64) float64 { return math.Round(s*1e7) / 10 }
