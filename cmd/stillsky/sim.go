package main

import (
	"errors"
	"flag"
	"fmt"
	"runtime"
	"strings"

	"stillsky/internal/affinity"
	"stillsky/sim/bench"
	"stillsky/sim/scenario"
)

func init() {
	register("sim", "run the simulated optical bench (camera and mirror devices)", runSim)
}

func runSim(args []string) error {
	fs := newFlagSet("sim")
	scn := fs.String("scenario", scenario.Default, "built-in scenario name or path to a scenario YAML file"+"; "+scenario.EyeCaution+"; "+scenario.LGSCaution)
	camera := fs.String("camera", "127.0.0.1:7401", "camera gRPC address (host:port or unix:/path)")
	mirror := fs.String("mirror", "127.0.0.1:7402", "mirror gRPC address (may equal --camera)")
	tipTilt := fs.String("tip-tilt", "127.0.0.1:7404", "gRPC address of the natural-star tip-tilt sensor (a Camera) and the tip-tilt mirror (a Mirror), served when the scenario has a tip_tilt section")
	metrics := fs.String("metrics", "127.0.0.1:7403", "HTTP address of /metrics and /psf.png (\"\" to disable)")
	lockstep := fs.Bool("lockstep", false, "produce frame k only after the command for frame k−delay (reproducible)")
	delay := fs.Int("delay-frames", 0, "loop delay in frames modelled in lockstep mode (0: the scenario's)")
	readout := fs.Duration("readout-time", 0, "spread the chunks of a chunked frame over this readout time (0: back to back)")
	idle := fs.Bool("idle-priority", true, "free-running, simulate and image under SCHED_IDLE so the device streams and a loop on the same machine always come first")
	cpus := fs.String("cpus", "", "pin the simulator's threads to these CPUs, e.g. 0 or 0-1 (\"\": no pinning)")
	prerendered := fs.Int("prerendered", 0, "free-running, render this many frames (sensor noise behind a corrected wavefront) at start and stream them in turn while the sky is selected, so the camera costs nothing per frame; the calibration source is still simulated (0: simulate every frame)")
	logLevel := fs.String("log-level", "info", "log level: debug, info, warn, error")
	replay := fs.String("replay", "", "serve this telemetry recording (stillsky ctl record) as the camera, at its frame rate, looping, with a mirror that takes commands; no simulation, no metrics")
	loop := fs.String("loop", "", "with --replay: refuse a recording whose geometry differs from the loop daemon's at this Control API address")
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	log, err := newLogger(*logLevel)
	if err != nil {
		return err
	}
	if *replay != "" {
		var simOnly []string
		fs.Visit(func(f *flag.Flag) {
			switch f.Name {
			case "scenario", "lockstep", "delay-frames", "readout-time", "metrics":
				simOnly = append(simOnly, "--"+f.Name)
			}
		})
		if len(simOnly) > 0 {
			return fmt.Errorf("%s: not for --replay, which serves the recording as it was recorded", strings.Join(simOnly, ", "))
		}
		return runReplay(*replay, *camera, *mirror, *loop, log)
	}
	if *loop != "" {
		return errors.New("--loop checks a recording's geometry: it needs --replay")
	}
	if *cpus != "" {
		set, err := affinity.Parse(*cpus)
		if err != nil {
			return fmt.Errorf("--cpus: %w", err)
		}
		if err := affinity.PinProcess(set); err != nil {
			return fmt.Errorf("--cpus %s: %w", *cpus, err)
		}
	}
	if *idle {
		runtime.GOMAXPROCS(runtime.GOMAXPROCS(0) + bench.IdleExtraProcs)
	}
	s, err := scenario.Load(*scn)
	if err != nil {
		return err
	}
	srv, err := bench.NewServer(s, bench.Options{Lockstep: *lockstep, DelayFrames: *delay, ReadoutTime: *readout, IdlePriority: *idle, Prerendered: *prerendered, Logger: log})
	if err != nil {
		return err
	}
	addrs := bench.Addrs{Camera: *camera, Mirror: *mirror, Metrics: *metrics}
	if s.TipTilt != nil {
		addrs.TipTilt = *tipTilt
	} else if flagSet(fs, "tip-tilt") {
		return fmt.Errorf("--tip-tilt: scenario %s has no tip_tilt section", s.Name)
	}
	if addrs.Mirror == addrs.Camera {
		addrs.Mirror = ""
	}
	l, err := bench.Listen(addrs)
	if err != nil {
		return err
	}
	ctx, stop := signalContext()
	defer stop()
	return srv.Serve(ctx, l, srv.RegisterLiveView)
}

// flagSet reports whether the flag name was given on the command line.
func flagSet(fs *flag.FlagSet, name string) bool {
	set := false
	fs.Visit(func(f *flag.Flag) { set = set || f.Name == name })
	return set
}
