package main

import (
	"errors"
	"fmt"
	"os"
	"strconv"

	"stillsky/cmd/stillsky/internal/sweep"
	"stillsky/daemon"
)

func init() {
	register("sweep", "run a design study: lockstep closed-loop runs over a grid of settings; 'sweep collect DIR' merges results", runSweep)
}

const sweepUsage = `
usage:
  stillsky sweep [--jobs N] [--out DIR] SPEC.yaml        run every point here, then collect
  stillsky sweep --point I [--out DIR] SPEC.yaml         run point I only
  stillsky sweep --kubernetes DIR [flags] SPEC.yaml      write an Indexed Job and its ConfigMap
  stillsky sweep collect DIR                             merge results into DIR/sweep.csv and plots

The spec is validated whole before anything runs (see 'go doc stillsky/cmd/stillsky/internal/sweep').
`

func runSweep(args []string) error {
	if len(args) > 0 && args[0] == "collect" {
		return runSweepCollect(args[1:])
	}
	fs := newFlagSet("sweep")
	jobs := fs.Int("jobs", 1, "points run at once on this machine (each keeps about one CPU busy)")
	out := fs.String("out", "sweep-results", "directory of the result files (one JSON per point), the CSV and the plots")
	point := fs.Int("point", -1, "run only this point (0-based index)")
	fromEnv := fs.Bool("point-from-env", false, "run only the point JOB_COMPLETION_INDEX names (set by Kubernetes in an Indexed Job's pods)")
	kube := fs.String("kubernetes", "", "write configmap.yaml and job.yaml for this sweep into this directory instead of running it")
	var ko sweep.KubeOptions
	fs.StringVar(&ko.Image, "image", "localhost/stillsky:latest", "--kubernetes: container image with the stillsky binary")
	fs.StringVar(&ko.Namespace, "namespace", "stillsky", "--kubernetes: namespace of the Job and ConfigMap")
	fs.StringVar(&ko.ResultsClaim, "results-claim", "stillsky-sweep-results", "--kubernetes: PersistentVolumeClaim the results are written to (ReadWriteMany across nodes)")
	fs.IntVar(&ko.Parallelism, "parallelism", 0, "--kubernetes: points run at once (0: up to 8)")
	fs.StringVar(&ko.CPU, "cpu", "2", "--kubernetes: CPU of each pod, requested and limited (Guaranteed QoS)")
	fs.StringVar(&ko.Memory, "memory", "1Gi", "--kubernetes: memory of each pod, requested and limited")
	fs.Usage = func() {
		fmt.Fprint(fs.Output(), sweepUsage, "\nflags:\n")
		fs.PrintDefaults()
	}
	if err := fs.Parse(args); err != nil {
		return err
	}
	if fs.NArg() != 1 {
		return errors.New("want one spec file (run 'stillsky sweep -h')")
	}
	s, err := sweep.Load(fs.Arg(0))
	if err != nil {
		return err
	}
	// Every point runs the bench and the loop in this process, as the demo does.
	shareProcessWithSimulator()
	daemon.ProcessSettings(daemon.Realtime{}, nil)
	if *fromEnv {
		if *point >= 0 {
			return errors.New("give --point or --point-from-env, not both")
		}
		v := os.Getenv("JOB_COMPLETION_INDEX")
		if *point, err = strconv.Atoi(v); err != nil {
			return fmt.Errorf("--point-from-env: JOB_COMPLETION_INDEX %q is not an index", v)
		}
	}
	switch {
	case *kube != "":
		if *point >= 0 || *jobs != 1 {
			return errors.New("--kubernetes writes manifests: --point and --jobs do not apply")
		}
		paths, err := sweep.WriteManifests(s, ko, *kube)
		if err != nil {
			return err
		}
		fmt.Printf("sweep %s: %d points; wrote %s and %s (kubectl apply -f %s)\n", s.Name, len(s.Points), paths[0], paths[1], *kube)
		return nil
	case *point >= 0:
		if *point >= len(s.Points) {
			return fmt.Errorf("point %d: the sweep has points 0 to %d", *point, len(s.Points)-1)
		}
		if err := os.MkdirAll(*out, 0o755); err != nil {
			return err
		}
		ctx, stop := signalContext()
		defer stop()
		r := sweep.RunPoint(ctx, s, *point)
		if err := r.Write(*out); err != nil {
			return err
		}
		if r.Error != "" {
			fmt.Fprintf(os.Stderr, "stillsky sweep: point %d failed: %s\n", *point, r.Error)
			os.Exit(sweep.ExitPointFailed)
		}
		return nil
	}
	ctx, stop := signalContext()
	defer stop()
	fmt.Printf("sweep %s: %d points, %d at a time, results in %s\n", s.Name, len(s.Points), *jobs, *out)
	if _, err := sweep.RunLocal(ctx, s, *out, *jobs, os.Stdout); err != nil {
		return err
	}
	return collect(*out)
}

func runSweepCollect(args []string) error {
	fs := newFlagSet("sweep collect")
	if err := fs.Parse(args); err != nil {
		return err
	}
	if fs.NArg() != 1 {
		return errors.New("collect: want one results directory")
	}
	return collect(fs.Arg(0))
}

// collect merges the results in dir, lists the failed points, and fails when
// there are any (after writing everything else).
func collect(dir string) error {
	c, err := sweep.Collect(dir)
	if err != nil {
		return err
	}
	files, err := c.WriteFiles(dir)
	for _, f := range files {
		fmt.Println("wrote", f)
	}
	if err != nil && !errors.Is(err, sweep.ErrNoGain) {
		return err
	}
	if err != nil {
		fmt.Println(err)
	}
	failed := c.Failed()
	for _, r := range failed {
		fmt.Fprintf(os.Stderr, "point %d (%s) failed: %s\n", r.Index, sweep.Describe(r.Settings), r.Error)
	}
	if len(failed) > 0 {
		return fmt.Errorf("%d of %d points failed; the others are in %s", len(failed), c.Points, dir)
	}
	return nil
}
