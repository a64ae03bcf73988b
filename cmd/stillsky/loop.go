package main

import (
	"stillsky/daemon"
	"stillsky/daemon/supervisor"
)

func init() {
	register("loop", "run the loop daemon against a camera and a mirror", runLoop)
}

const loopCaution = `
Caution: on real hardware this daemon drives a deformable mirror. Set the stroke
limits from the manufacturer's data sheet, never above it: a mirror driven past its
stroke or inter-actuator limits can be damaged. A simulator proves software, not
hardware or human safety; follow the manufacturer's limits, local codes and
licensed practice (laser guide stars and retinal imaging have their own rules).
Laser guide stars (--tip-tilt): a real laser pointed at the sky needs coordination
with the aviation authority and a laser-safety review (ANSI Z136.1, ANSI Z136.6,
IEC 60825-1); local rules govern.
Retinal imaging: give the beacon's power and exposure time and the limit for them
(--beacon-power-w, --beacon-exposure-s, --exposure-limit-j) and the daemon refuses
to start above the limit. A camera that declares its beacon in its Describe
(retinal_beacon, as the simulator's eye camera does) is checked by its own figures
when it connects, against the lower of its limit and --exposure-limit-j, and
refused above it. The check is indicative only: exposure limits follow
ANSI Z136.1 and ISO 15004-2, and local medical-device and ethics rules and licensed
practice govern any real use.
Unattended operation (--autonomous): the daemon calibrates, closes, holds, opens and
closes the loop again on the guide star's flux with nobody at the controls. It is not
a safety system: the dome, weather and personnel interlocks of the site govern, and
an operator's open, close or hold through the Control API always takes over (the
supervisor then only watches; stillsky_supervisor_state shows "manual").
`

func runLoop(args []string) error {
	fs := newFlagSet("loop")
	camera := fs.String("camera", "127.0.0.1:7401", "camera gRPC address (host:port or unix:/path)")
	mirror := fs.String("mirror", "127.0.0.1:7402", "mirror gRPC address")
	tipTilt := fs.String("tip-tilt", "", "gRPC address of a natural-star tip-tilt sensor and a tip-tilt mirror (stillsky sim --tip-tilt, 127.0.0.1:7404 for the lgs scenario): runs the tip-tilt loop, ignores the camera's own tip-tilt and offloads the deformable mirror's to the tip-tilt mirror (\"\": no tip-tilt loop)")
	ttGain := fs.Float64("tip-tilt-gain", 0.4, "tip-tilt integrator gain, in [0, 2) (with --tip-tilt)")
	ttOffload := fs.Float64("tip-tilt-offload", 0.05, "fraction of the deformable mirror's tip-tilt moved to the tip-tilt mirror per frame, in (0, 1] (with --tip-tilt)")
	listen := fs.String("listen", "127.0.0.1:7411", "Control API gRPC address")
	health := fs.String("health-listen", "", "plain-text address serving only the gRPC health service, for probes (\"\" for none)")
	metrics := fs.String("metrics", "127.0.0.1:7412", "HTTP address of /metrics and the live view (\"-\" to disable)")
	stateDir := fs.String("state-dir", "", "directory keeping the committed reconstructor and settings across restarts")
	gain := fs.Float64("gain", 0.4, "integrator gain at start, in [0, 2)")
	leak := fs.Float64("leak", 0.01, "integrator leak at start, in [0, 1)")
	wavelength := fs.Float64("science-wavelength", 1.65e-6, "wavelength of the Strehl estimate, metres")
	chunks := fs.Int("chunks", 0, "ask the camera for frames in this many chunks (pipelined reconstruction)")
	benchURL := fs.String("bench-url", "", "HTTP base URL of the simulated bench (its --metrics address, e.g. http://127.0.0.1:7403), whose PSF the live view shows")
	logLevel := fs.String("log-level", "info", "log level: debug, info, warn, error")
	cpu := fs.Int("rt-cpu", -1, "pin the real-time thread to this CPU (-1: no pinning)")
	fifo := fs.Int("rt-fifo", 0, "run the real-time thread under SCHED_FIFO at this priority, 1-99 (0: normal scheduling)")
	spin := fs.Duration("rt-spin", 0, "after each command, poll for the next frame on the real-time thread's own CPU for up to this long before blocking, e.g. 900us (0: block at once); keeps a CPU busy")
	mlock := fs.Bool("mlock", false, "lock the process's memory (mlockall)")
	bf16 := fs.Bool("bf16", false, "store the control matrix as bfloat16 (half the memory traffic, ~0.1% command error)")
	workers := fs.Int("mvm-workers", 0, "threads of the matrix-vector multiply (0: chosen by size)")
	var sec daemon.Security
	fs.StringVar(&sec.CertFile, "tls-cert", "", "TLS certificate of the Control API (PEM); required off loopback")
	fs.StringVar(&sec.KeyFile, "tls-key", "", "TLS key of the Control API (PEM)")
	fs.StringVar(&sec.ClientCAFile, "client-ca", "", "CA that signs client certificates allowed to change the loop (mutual TLS)")
	fs.StringVar(&sec.TokenFile, "token-file", "", "file holding the bearer token allowed to change the loop")
	beaconPower := fs.Float64("beacon-power-w", 0, "retinal imaging: the beacon's power entering the eye, watts (with --beacon-exposure-s and --exposure-limit-j; 0: no beacon declared)")
	beaconExposure := fs.Float64("beacon-exposure-s", 0, "retinal imaging: the beacon's exposure time, seconds")
	exposureLimit := fs.Float64("exposure-limit-j", 0, "retinal imaging: the energy the beacon may put into the eye over its exposure time, joules; the daemon refuses to start above it (indicative check only)")
	autonomous := fs.Bool("autonomous", false, "run the unattended-operation supervisor: calibrate if there is no reconstructor, close on enough flux, hold through a cloud, open (no trip) when it lasts, close again when the flux returns")
	sup := supervisor.DefaultConfig()
	fs.Float64Var(&sup.MinFlux, "min-flux", sup.MinFlux, "--autonomous: least mean guide-star flux per frame to close, photo-electrons (> 0)")
	fs.Float64Var(&sup.LossFraction, "loss-fraction", sup.LossFraction, "--autonomous: flux below this fraction of the reference is lost, in (0, --return-fraction)")
	fs.Float64Var(&sup.ReturnFraction, "return-fraction", sup.ReturnFraction, "--autonomous: flux at or above this fraction of the reference is back, in (--loss-fraction, 1]")
	fs.DurationVar(&sup.LossDwell, "loss-dwell", sup.LossDwell, "--autonomous: how long the flux must stay lost before holding, [0, --hold-timeout)")
	fs.DurationVar(&sup.ReturnDwell, "return-dwell", sup.ReturnDwell, "--autonomous: how long the flux must stay back before closing, [0, 2s)")
	fs.DurationVar(&sup.HoldTimeout, "hold-timeout", sup.HoldTimeout, "--autonomous: longest hold before opening the loop (> 0)")
	fs.DurationVar(&sup.LongPause, "long-pause", sup.LongPause, "--autonomous: open this long, measure the reference flux again (> --hold-timeout)")
	fs.DurationVar(&sup.MeasureWindow, "measure-window", sup.MeasureWindow, "--autonomous: window over which the reference flux is measured (> 0)")
	fs.DurationVar(&sup.RetryDelay, "retry-delay", sup.RetryDelay, "--autonomous: wait after a failed calibration before the next (> 0)")
	fs.Usage = func() {
		fs.PrintDefaults()
		fs.Output().Write([]byte(loopCaution))
	}
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	log, err := newLogger(*logLevel)
	if err != nil {
		return err
	}
	cfg := daemon.Config{
		CameraAddr: *camera, MirrorAddr: *mirror, ListenAddr: *listen, HealthAddr: *health, MetricsAddr: *metrics,
		StateDir: *stateDir, Gain: gain, Leak: leak, ScienceWavelength: *wavelength,
		Chunks: *chunks, Security: sec, Logger: log, BenchURL: *benchURL,
		Realtime: daemon.Realtime{Pin: *cpu >= 0, CPU: *cpu, FIFOPriority: *fifo, LockMemory: *mlock, Spin: *spin},
		Kernel:   kernelOptions(*bf16),
	}
	cfg.Kernel.Workers = *workers
	if *tipTilt != "" {
		cfg.TipTilt = &daemon.TipTiltConfig{CameraAddr: *tipTilt, MirrorAddr: *tipTilt, Gain: ttGain, OffloadGain: *ttOffload}
	}
	if *beaconPower != 0 || *beaconExposure != 0 || *exposureLimit != 0 {
		cfg.Beacon = &daemon.Beacon{PowerW: *beaconPower, ExposureS: *beaconExposure, LimitJ: *exposureLimit}
	}
	if *autonomous {
		cfg.Autonomous = &daemon.Autonomous{Supervisor: sup}
	}
	d, err := daemon.New(cfg)
	if err != nil {
		return err
	}
	daemon.ProcessSettings(cfg.Realtime, log)
	ctx, stop := signalContext()
	defer stop()
	return d.Run(ctx)
}
