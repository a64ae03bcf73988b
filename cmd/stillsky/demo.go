package main

import (
	"fmt"
	"os"

	"stillsky/cmd/stillsky/internal/demo"
	"stillsky/daemon"
	"stillsky/sim/scenario"
)

func init() {
	register("demo", "run bench and loop together: calibrate, open loop, closed loop, summary", runDemo)
}

func runDemo(args []string) error {
	fs := newFlagSet("demo")
	scn := fs.String("scenario", "", "built-in scenario name or path to a scenario YAML file (default: the default scenario)"+"; "+scenario.EyeCaution+"; "+scenario.LGSCaution)
	frames := fs.Int("frames", 0, "closed-loop frames (default 5000; the open-loop phase runs 2000; when the bench or the loop cannot keep real time the demo says so and runs lockstep, with the phases' defaults cut to about 15 s and 40 s of wall time)")
	gain := fs.Float64("gain", -1, "integrator gain in closed loop, in [0, 2) (default: the daemon's 0.4)")
	summary := fs.String("summary", "", "write the summary as JSON to this file")
	lockstep := fs.Bool("lockstep", false, "run the bench in lockstep mode (reproducible) instead of free-running; without it the demo checks first that the machine keeps real time")
	basis := fs.String("basis", "", "modal basis of the reconstructor and its modal gains: svd (the interaction matrix's singular modes, the default), kl (Karhunen–Loève modes of Kolmogorov turbulence on the mirror) or mirror (the mirror's own modes, orthonormal in surface and ordered by the sensor's sensitivity)")
	autonomous := fs.Bool("autonomous", false, "run a stretch of night with no operator instead of the open and closed phases: the loop's supervisor (stillsky loop --autonomous) calibrates, closes, holds through a cloud, opens (no trip) when it lasts and closes again; the scenario's clouds list sets the passages (two of the demo's own, at 10 s and 18 s of frame time, when it has none) and its supervisor section the thresholds; the summary lists every transition with its frame time and each cloud's re-close time. Not a safety system: a real site's dome, weather and personnel interlocks govern")
	night := fs.Duration("night", 0, "with --autonomous: length of the night in frame time (default: until 4 s after the last cloud)")
	logLevel := fs.String("log-level", "warn", "log level of bench and loop: debug, info, warn, error")
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	log, err := newLogger(*logLevel)
	if err != nil {
		return err
	}
	if *basis != "" && *basis != "svd" && *basis != "kl" && *basis != "mirror" {
		return fmt.Errorf("demo: --basis %q: want svd, kl or mirror", *basis)
	}
	if *night != 0 && !*autonomous {
		return fmt.Errorf("demo: --night is for --autonomous")
	}
	cfg := demo.Config{Scenario: *scn, FramesClosed: *frames, Lockstep: *lockstep, Basis: *basis, Out: os.Stdout, Logger: log,
		Autonomous: *autonomous, Night: *night}
	if *gain != -1 {
		cfg.Gain = gain
	}
	daemon.ProcessSettings(daemon.Realtime{}, log)
	ctx, stop := signalContext()
	defer stop()
	s, err := demo.Run(ctx, cfg)
	if s != nil && *summary != "" {
		if werr := s.WriteJSON(*summary); werr != nil {
			return werr
		}
	}
	return err
}
