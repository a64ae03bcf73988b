package main

import (
	"os"
	"runtime"
	"strings"
	"time"

	"stillsky/cmd/stillsky/internal/latency"
	"stillsky/controller/mvm"
	"stillsky/daemon"
)

func init() {
	register("latency", "measure compute, rtc and end-to-end latency against the transport floor", runLatency)
	// The command's name until this release; "bench" reads as the simulated bench.
	registerAlias("bench", "latency")
}

// listFlag collects a repeatable flag.
type listFlag []string

func (l *listFlag) String() string { return strings.Join(*l, ",") }
func (l *listFlag) Set(v string) error {
	*l = append(*l, v)
	return nil
}

func runLatency(args []string) error {
	fs := newFlagSet("latency")
	var scenarios, transports listFlag
	fs.Var(&scenarios, "scenario", "scenario to measure (repeatable; default: the default scenario)")
	fs.Var(&transports, "transport", "tcp or unix (repeatable; default: both)")
	rate := fs.Float64("rate", 0, "frame rate in Hz (default: each scenario's)")
	duration := fs.Duration("duration", 0, "closed-loop measurement per scenario and transport (default 10s)")
	chunks := fs.Int("chunks", 0, "send each frame in this many chunks (pipelined reconstruction)")
	readout := fs.Duration("readout-time", 0, "spread the chunks of a frame over this readout time; latencies count from its end (0: back to back)")
	jsonOut := fs.String("json", "", "write the results as a JSON array to this file")
	bf16 := fs.Bool("bf16", false, "store the control matrix as bfloat16")
	cpu := fs.Int("rt-cpu", -1, "pin the loop's real-time thread to this CPU (-1: no pinning)")
	fifo := fs.Int("rt-fifo", 0, "run the loop's real-time thread under SCHED_FIFO at this priority (0: normal)")
	spin := fs.Duration("rt-spin", 0, "the loop's real-time thread polls for the next frame for up to this long before blocking (0: block at once)")
	workers := fs.Int("mvm-workers", -1, "threads of the loop's matrix-vector multiply (0: chosen by size; -1: 1 on a machine of 2 CPUs or fewer, whose other CPU the simulator needs, else by size)")
	simCPUs := fs.String("sim-cpus", "", "pin the simulator's process to these CPUs, e.g. 0 (\"\": no pinning)")
	inProcess := fs.Bool("in-process", false, "run the simulated bench inside the loop's process instead of as its own")
	logLevel := fs.String("log-level", "warn", "log level of bench and loop")
	replay := fs.String("replay", "", "measure against this telemetry recording (stillsky ctl record) replayed as the camera, with its reconstructor, instead of a simulated scenario")
	camera := fs.String("camera", "simulated", "what feeds the loop while it is measured: simulated (the bench simulates every frame) or prerendered (the bench renders a set of frames at start and streams them in turn, its physics off the CPU)")
	block := fs.Duration("block", time.Second, "length of each block of the measurement: loop and transport floor alternate, each block's figures and cpu steal kept")
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	log, err := newLogger(*logLevel)
	if err != nil {
		return err
	}
	var sim string
	if !*inProcess {
		if sim, err = os.Executable(); err != nil {
			return err
		}
	}
	kernel := kernelOptions(*bf16)
	kernel.Workers = *workers
	if *workers < 0 {
		kernel.Workers = 0
		if runtime.NumCPU() <= 2 {
			kernel.Workers = 1
		}
	}
	shareProcessWithSimulator()
	daemon.ProcessSettings(daemon.Realtime{}, log)
	ctx, stop := signalContext()
	defer stop()
	rs, err := latency.Run(ctx, latency.Config{
		SimulatorExecutable: sim, SimulatorCPUs: *simCPUs,
		Realtime:  daemon.Realtime{Pin: *cpu >= 0, CPU: *cpu, FIFOPriority: *fifo, Spin: *spin},
		Scenarios: scenarios, Transports: transports, Rate: *rate, Duration: *duration,
		Chunks: *chunks, ReadoutTime: *readout, Out: os.Stdout, Logger: log, Kernel: kernel, Replay: *replay,
		Camera: *camera, Block: *block,
	})
	if rs != nil && *jsonOut != "" {
		if werr := latency.WriteJSON(*jsonOut, rs); werr != nil {
			return werr
		}
	}
	return err
}

// kernelOptions is the matrix–vector kernel a --bf16 flag asks for.
func kernelOptions(bf16 bool) mvm.Options {
	if bf16 {
		return mvm.Options{Precision: mvm.BFloat16}
	}
	return mvm.Options{}
}
