package daemon

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"math"
	"net"
	"net/http"
	"sync"
	"sync/atomic"
	"time"

	"github.com/prometheus/client_golang/prometheus/promhttp"
	"google.golang.org/grpc"

	"stillsky/controller/mvm"
	"stillsky/internal/rpc"
	stillskyv1 "stillsky/proto/stillsky/v1"
)

// Config is what the loop daemon needs to run. Zero values take the documented
// defaults.
type Config struct {
	// CameraAddr and MirrorAddr are the devices' gRPC addresses (host:port or
	// unix:/path).
	CameraAddr, MirrorAddr string
	// ListenAddr is the Control API's gRPC address; default 127.0.0.1:7411.
	ListenAddr string
	// HealthAddr, if set, serves only the standard gRPC health service, in
	// plain text, for orchestrator probes that cannot present TLS credentials (a
	// kubelet's gRPC probe); it exposes nothing else and changes nothing.
	HealthAddr string
	// MetricsAddr is the HTTP address of /metrics and the live view; default
	// 127.0.0.1:7412. "-" disables it.
	MetricsAddr string
	// StateDir keeps the committed reconstructor and settings across restarts; ""
	// keeps nothing.
	StateDir string
	// Gain and Leak of the integrator at start; defaults 0.4 and 0.01.
	Gain, Leak *float64
	// ScienceWavelength of the Strehl estimate, metres; default 1.65e-6 (H band).
	ScienceWavelength float64
	// Chunks asks the camera for frames in this many chunks (pipelined
	// reconstruction); 0 or 1 for whole frames.
	Chunks int
	// Kernel chooses the matrix–vector kernel, its threads and the storage
	// precision of the control matrix; the zero value picks the fastest float32
	// kernel and the thread count by size.
	Kernel mvm.Options
	// Realtime asks for CPU affinity and SCHED_FIFO of the real-time thread; the
	// zero value asks for none. Its LockMemory is for ProcessSettings.
	Realtime Realtime
	// Recorder, if set, records every frame's timings while started.
	Recorder *Recorder
	// Interlocks are the safety limits; see Interlocks.
	Interlocks Interlocks
	// Beacon, if set, is a retinal imager's beacon: New refuses it above its
	// exposure limit (see Beacon).
	Beacon *Beacon
	// Security protects the Control API; see Security.
	Security Security
	// Logger receives the daemon's log; nil discards it.
	Logger *slog.Logger
	// AnalysisPeriod is the time between the loop's analyses of itself
	// (turbulence estimate and error budget); 0 means 10 s, negative turns them off.
	AnalysisPeriod time.Duration
	// TipTilt, if set, runs the tip-tilt loop on a natural-star tip-tilt
	// sensor and a tip-tilt mirror beside the high-order loop; see
	// TipTiltConfig.
	TipTilt *TipTiltConfig
	// BenchURL is the HTTP base URL of the simulated bench, whose PSF the live view
	// shows; "" for none.
	BenchURL string
	// Autonomous, if set, runs the unattended-operation supervisor; see
	// Autonomous.
	Autonomous *Autonomous
}

func (c *Config) setDefaults() error {
	if c.CameraAddr == "" || c.MirrorAddr == "" {
		return errors.New("daemon: camera and mirror addresses are required")
	}
	if c.ListenAddr == "" {
		c.ListenAddr = "127.0.0.1:7411"
	}
	if c.MetricsAddr == "" {
		c.MetricsAddr = "127.0.0.1:7412"
	}
	if c.ScienceWavelength == 0 {
		c.ScienceWavelength = 1.65e-6
	}
	if !(c.ScienceWavelength > 0) || math.IsInf(c.ScienceWavelength, 0) {
		return fmt.Errorf("daemon: science wavelength %g m: must be finite and > 0", c.ScienceWavelength)
	}
	if c.Chunks < 0 {
		return fmt.Errorf("daemon: chunks %d: must be >= 0", c.Chunks)
	}
	if c.Logger == nil {
		c.Logger = slog.New(slog.DiscardHandler)
	}
	if err := c.Realtime.validate(); err != nil {
		return err
	}
	if err := c.Beacon.validate(); err != nil {
		return err
	}
	if c.TipTilt != nil {
		tt := *c.TipTilt
		if err := tt.setDefaults(); err != nil {
			return err
		}
		c.TipTilt = &tt
	}
	return c.Interlocks.setDefaults()
}

// geometry is what the daemon learns from the devices' Describe.
type geometry struct {
	slopes, actuators int
	frameRate         float64
	stroke            float64
	delayFrames       int
	lockstep          bool
	// The mirror's layout, for modal bases: positions (x0, y0, x1, …, metres),
	// actuators across, pitch (metres) and neighbour coupling.
	positions       []float64
	across          int
	pitch, coupling float64
	// pixels is a pixel camera's geometry, nil for a slope camera.
	pixels *pixelGeometry
}

// Daemon is the loop process: device links, the real-time goroutine, the Control
// API and the metrics.
type Daemon struct {
	cfg Config
	log *slog.Logger
	m   *metrics

	ctlLis, httpLis, healthLis net.Listener
	grpcServer, healthServer   *grpc.Server
	httpServer                 *http.Server

	// Set once the devices have been described.
	geomMu sync.Mutex
	geom   *geometry

	// u is the real-time unit; the fields below are the control plane's.
	u *unit

	// paramsMu guards gain and leak and serialises parameter installs.
	paramsMu   sync.Mutex
	gain, leak float64

	// an is the loop's analysis of itself (analysis.go).
	an analyser
	// auto is the unattended-operation supervisor, nil without Config.Autonomous.
	auto *autonomy

	// pixParts are a pixel camera's captured dark, flat and reference.
	pixParts pixelParts

	// describes holds the devices' Describe answers, for the live view.
	describes atomic.Pointer[describes]
	// camera is the connected camera's client, for source selection.
	camera atomic.Pointer[stillskyv1.CameraServiceClient]

	cameraUp, mirrorUp atomic.Bool
	restored           bool // guarded by restoreMu
}

// New validates cfg and opens the daemon's listeners, so that their addresses are
// known (and a port in use is reported) before Run.
func New(cfg Config) (*Daemon, error) {
	if err := cfg.setDefaults(); err != nil {
		return nil, err
	}
	d := &Daemon{cfg: cfg, log: cfg.Logger, m: newMetrics(), gain: 0.4, leak: 0.01}
	if cfg.Gain != nil {
		d.gain = *cfg.Gain
	}
	if cfg.Leak != nil {
		d.leak = *cfg.Leak
	}
	if err := validGainLeak(d.gain, d.leak); err != nil {
		return nil, err
	}
	d.u = newUnit(d.m, d.log, cfg.Interlocks, cfg.Recorder)
	if cfg.Autonomous != nil {
		var err error
		if d.auto, err = newAutonomy(*cfg.Autonomous); err != nil {
			return nil, fmt.Errorf("daemon: autonomous: %w", err)
		}
		d.u.auto = d.auto
	}
	if cfg.TipTilt != nil {
		d.u.tt = &tipTilt{cfg: *cfg.TipTilt}
		d.u.tt.stale.Store(int64(time.Second))
		d.m.ttGain.Set(*cfg.TipTilt.Gain)
	}
	d.m.gain.Set(d.gain)
	d.m.leak.Set(d.leak)
	d.m.wavelength.Set(cfg.ScienceWavelength)

	secOpts, err := cfg.Security.serverOptions(cfg.ListenAddr)
	if err != nil {
		return nil, err
	}
	// The refusal counter wraps everything, authentication included.
	opts := append([]grpc.ServerOption{grpc.ChainUnaryInterceptor(d.unaryCounter), grpc.ChainStreamInterceptor(d.streamCounter)}, secOpts...)
	if d.ctlLis, err = rpc.Listen(cfg.ListenAddr); err != nil {
		return nil, fmt.Errorf("daemon: control listener: %w", err)
	}
	if cfg.MetricsAddr != "-" {
		if d.httpLis, err = rpc.Listen(cfg.MetricsAddr); err != nil {
			d.ctlLis.Close()
			return nil, fmt.Errorf("daemon: metrics listener: %w", err)
		}
	}
	if cfg.HealthAddr != "" {
		if d.healthLis, err = rpc.Listen(cfg.HealthAddr); err != nil {
			d.ctlLis.Close()
			if d.httpLis != nil {
				d.httpLis.Close()
			}
			return nil, fmt.Errorf("daemon: health listener: %w", err)
		}
		d.healthServer = rpc.NewHealthOnlyServer([]string{stillskyv1.ControlService_ServiceDesc.ServiceName})
	}
	d.grpcServer, _ = rpc.NewServer([]string{stillskyv1.ControlService_ServiceDesc.ServiceName}, opts...)
	stillskyv1.RegisterControlServiceServer(d.grpcServer, &controlServer{d: d})
	mux := http.NewServeMux()
	mux.Handle("/metrics", promhttp.HandlerFor(d.m.reg, promhttp.HandlerOpts{Registry: d.m.reg}))
	d.registerLiveView(mux)
	d.httpServer = &http.Server{Handler: mux, ReadHeaderTimeout: 5 * time.Second}
	return d, nil
}

// ControlAddr returns the address the Control API listens on.
func (d *Daemon) ControlAddr() string { return d.ctlLis.Addr().String() }

// MetricsAddr returns the address of the HTTP server, or "" when disabled.
func (d *Daemon) MetricsAddr() string {
	if d.httpLis == nil {
		return ""
	}
	return d.httpLis.Addr().String()
}

// Run serves the Control API and metrics, connects to the devices (retrying with
// backoff) and runs the loop until ctx ends.
func (d *Daemon) Run(ctx context.Context) error {
	errc := make(chan error, 3)
	go func() { errc <- d.grpcServer.Serve(d.ctlLis) }()
	if d.healthServer != nil {
		go func() { errc <- d.healthServer.Serve(d.healthLis) }()
	}
	if d.httpLis != nil {
		go func() {
			if err := d.httpServer.Serve(d.httpLis); !errors.Is(err, http.ErrServerClosed) {
				errc <- err
			}
		}()
	}
	d.log.Info("loop daemon listening", "control", d.ControlAddr(), "metrics", d.MetricsAddr())
	go d.devices(ctx)
	if d.u.tt != nil {
		go d.tipTiltDevices(ctx)
		go d.u.tipTiltWatchdog(ctx)
	}
	if d.cfg.AnalysisPeriod >= 0 {
		go d.analyse(ctx)
	}
	if d.auto != nil {
		go d.supervise(ctx)
	}

	var err error
	select {
	case <-ctx.Done():
	case err = <-errc:
	}
	d.grpcServer.GracefulStop()
	if d.healthServer != nil {
		d.healthServer.Stop()
	}
	shut, cancel := context.WithTimeout(context.Background(), 2*time.Second)
	defer cancel()
	d.httpServer.Shutdown(shut)
	return err
}

// devices keeps the device session up: connect, describe, stream; on failure the
// loop opens and the daemon reconnects with exponential backoff.
func (d *Daemon) devices(ctx context.Context) {
	backoff := 100 * time.Millisecond
	for ctx.Err() == nil {
		start := time.Now()
		err := d.session(ctx)
		if ctx.Err() != nil {
			return
		}
		if time.Since(start) > 5*time.Second {
			backoff = 100 * time.Millisecond
		}
		d.log.Warn("device session ended; reconnecting", "err", err, "backoff", backoff)
		select {
		case <-ctx.Done():
			return
		case <-time.After(backoff):
		}
		backoff = min(2*backoff, 5*time.Second)
	}
}

func (d *Daemon) geometry() *geometry {
	d.geomMu.Lock()
	defer d.geomMu.Unlock()
	return d.geom
}
