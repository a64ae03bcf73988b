// Package latency is the latency benchmark behind `stillsky latency`: for each
// scenario and transport (TCP loopback, unix socket) it runs the bench
// free-running and the loop daemon closed, records every frame's timings, and in
// the same run measures the transport floor with a bare gRPC ping-pong of the same
// payload sizes against the bench's probe service, in blocks alternating with
// the loop's (the camera paused meanwhile): between the same two processes,
// over the same kind of connection, under the same load and steal. Each
// block's figures and steal are kept, and the loop is compared with its floor
// over the pairs of blocks of low steal.
package latency

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"math"
	"net"
	"os"
	"os/exec"
	"path/filepath"
	"time"

	"stillsky/cmd/stillsky/internal/ctl"
	"stillsky/controller/mvm"
	"stillsky/daemon"
	"stillsky/internal/atomicfile"
	"stillsky/internal/recording"
	stillskyv1 "stillsky/proto/stillsky/v1"
	"stillsky/rig"
	"stillsky/sim/bench"
	"stillsky/sim/scenario"
)

// Config selects what to measure. Zero values take the defaults.
type Config struct {
	// Scenarios to run; default the default scenario.
	Scenarios []string
	// Rate overrides the scenarios' frame rates, hertz (0 keeps them).
	Rate float64
	// Duration of the closed-loop measurement per scenario and transport; default 10 s.
	Duration time.Duration
	// Chunks sends each frame in this many chunks (pipelined reconstruction).
	Chunks int
	// ReadoutTime spreads a chunked frame's chunks over this time, as a
	// detector read out row by row delivers them; latencies count from the
	// end of the readout, the last chunk.
	ReadoutTime time.Duration
	// SimulatorExecutable, if set, runs the bench as its own process from this
	// stillsky binary; empty runs it inside this process.
	SimulatorExecutable string
	// SimulatorCPUs, if set, pins the simulator's process to these CPUs (a
	// kernel cpu list, as --cpus of stillsky sim takes).
	SimulatorCPUs string
	// Realtime is handed to the loop (affinity, SCHED_FIFO, mlockall).
	Realtime daemon.Realtime
	// Kernel is handed to the loop's matrix–vector multiply.
	Kernel mvm.Options
	// Transports to run, "tcp" and/or "unix"; default both.
	Transports []string
	// Out receives progress lines and the table.
	Out io.Writer
	// Logger receives the bench's and the daemon's log.
	Logger *slog.Logger
	// Replay, if set, is a telemetry recording (stillsky ctl record) served as
	// the camera at its recorded rate in place of the simulated bench, and the
	// loop runs the reconstructor stored in it: the loop and the transport are
	// measured with almost no simulator beside them. It excludes Scenarios,
	// Rate and Chunks.
	Replay string
	// Camera is "simulated" (or empty: the bench simulates every frame) or
	// "prerendered": the bench renders PrerenderedFrames frames at start and
	// streams them in turn while the loop is measured, so that its physics is
	// off the CPU (bench.Options.Prerendered). A replay is its own camera.
	Camera string
	// Block is the length of each block of the interleaved measurement (loop,
	// then floor, alternately); default 1 s.
	Block time.Duration
}

// PrerenderedFrames is how many frames the pre-rendered camera renders: a
// quarter of a second at 1 kHz, 0.9 MB for the default scenario, small
// beside the caches the control matrix needs.
const PrerenderedFrames = 256

// source is what feeds the loop: a scenario simulated by the bench, or a
// recording replayed.
type source struct {
	name   string
	rate   float64
	scn    *scenario.Scenario
	rec    *recording.Recording
	replay string // the recording's path
}

// Result is one scenario on one transport.
type Result struct {
	Scenario  string  `json:"scenario"`
	Transport string  `json:"transport"`
	RateHz    float64 `json:"rate_hz"`
	Frames    int     `json:"frames"`
	Chunks    int     `json:"chunks"`
	// The set-up: readout time of a chunked frame, the multiply's threads (0:
	// chosen by size) and storage, the simulator's CPUs and the loop's
	// real-time thread (CPU −1: not pinned; FIFO 0: normal scheduling).
	ReadoutUs       float64       `json:"readout_us"`
	MVMWorkers      int           `json:"mvm_workers"`
	BFloat16        bool          `json:"bfloat16"`
	SimCPUs         string        `json:"sim_cpus"`
	RTCPU           int           `json:"rt_cpu"`
	RTFIFO          int           `json:"rt_fifo"`
	RTSpinUs        float64       `json:"rt_spin_us"` // the real-time thread's polling (0: it blocks)
	Slopes          int           `json:"slopes"`
	Actuators       int           `json:"actuators"`
	TransitUs       rig.Quantiles `json:"transit_us"`
	ComputeUs       rig.Quantiles `json:"compute_us"`
	RTCUs           rig.Quantiles `json:"rtc_us"`
	EndToEndUs      rig.Quantiles `json:"end_to_end_us"`
	FloorUs         rig.Quantiles `json:"floor_us"`
	ArrivalJitterUs rig.Quantiles `json:"arrival_jitter_us"`
	// MissedDeadlines counts commands whose end-to-end latency exceeded one frame period.
	MissedDeadlines int `json:"missed_deadlines"`
	// FramesDropped counts frames the loop never received (gaps in frame numbers).
	FramesDropped uint64 `json:"frames_dropped"`
	// MaxRateHz is 1 / p99 of the rtc latency: the frame rate at which the
	// controller's own per-frame work fills 99% of frame periods. The simulated
	// camera may be slower than that.
	MaxRateHz float64 `json:"max_rate_hz"`
	// StealPercent is the share of the machine's CPU time that the hypervisor
	// gave to other guests during the measurement (/proc/stat), −1 when it
	// cannot be read. On a shared virtual machine it sets the tails.
	StealPercent float64 `json:"cpu_steal_percent"`
	// PressurePercent is the mean over the blocks of the share of time in
	// which some runnable task of the machine waited for a CPU (PSI,
	// /proc/pressure/cpu), −1 when it cannot be read: on 2 CPUs shared by more
	// runnable threads, the contention that steal does not show.
	PressurePercent float64 `json:"cpu_pressure_percent"`
	// Interrupted says the measurement was stopped early (Ctrl-C): the figures
	// are of the pairs of blocks completed until then.
	Interrupted bool `json:"interrupted,omitempty"`
	// Camera is what fed the loop: "simulated", "prerendered" or "replay".
	Camera string `json:"camera"`
	// BlockS is the length of each block, seconds; Blocks are the blocks,
	// loop and floor alternately, with their figures and steal; Quiet
	// compares the loop with its floor over the pairs of blocks with steal
	// below QuietSteal (absent when there were none). The figures above are
	// over every block.
	BlockS float64     `json:"block_s"`
	Blocks []Block     `json:"blocks"`
	Quiet  *Comparison `json:"quiet,omitempty"`
}

// ErrInterrupted is returned, with the results of what ran, when the run's
// context ends before the run does.
var ErrInterrupted = errors.New("interrupted")

var benchGain = 0.2

// Run measures every scenario on every transport. When ctx ends first (Ctrl-C),
// it keeps what the interrupted measurement recorded, prints the table of what
// ran and returns it with ErrInterrupted.
func Run(ctx context.Context, c Config) ([]Result, error) {
	if len(c.Scenarios) == 0 && c.Replay == "" {
		c.Scenarios = []string{scenario.Default}
	}
	if c.Duration == 0 {
		c.Duration = 10 * time.Second
	}
	if c.Duration < 100*time.Millisecond {
		return nil, fmt.Errorf("latency: duration %v: must be at least 100ms", c.Duration)
	}
	if c.Rate < 0 || math.IsInf(c.Rate, 0) || math.IsNaN(c.Rate) {
		return nil, fmt.Errorf("latency: rate %g Hz: must be > 0 (or 0 for the scenario's)", c.Rate)
	}
	if len(c.Transports) == 0 {
		c.Transports = []string{"tcp", "unix"}
	}
	if c.Camera != "" && c.Camera != "simulated" && c.Camera != "prerendered" {
		return nil, fmt.Errorf("latency: camera %q: want simulated or prerendered", c.Camera)
	}
	if c.Camera == "prerendered" && c.Replay != "" {
		return nil, errors.New("latency: --camera prerendered and --replay: a replay is its own camera")
	}
	if c.Block < 0 || c.Block > 0 && c.Block < 100*time.Millisecond {
		return nil, fmt.Errorf("latency: block %v: must be at least 100ms", c.Block)
	}
	for _, t := range c.Transports {
		if t != "tcp" && t != "unix" {
			return nil, fmt.Errorf("latency: transport %q: want tcp or unix", t)
		}
	}
	if c.Out == nil {
		c.Out = io.Discard
	}
	if c.Logger == nil {
		c.Logger = slog.New(slog.DiscardHandler)
	}
	var sources []source
	if c.Replay != "" {
		src, err := replaySource(c)
		if err != nil {
			return nil, err
		}
		sources = append(sources, src)
	}
	for _, name := range c.Scenarios {
		scn, err := scenario.Load(name)
		if err != nil {
			return nil, err
		}
		if c.Rate > 0 {
			scn.Loop.FrameRate = c.Rate
		}
		sources = append(sources, source{name: scn.Name, rate: scn.Loop.FrameRate, scn: scn})
	}
	var out []Result
	for _, src := range sources {
		for _, tr := range c.Transports {
			first := "calibrating"
			if src.rec != nil {
				first = "loading the recorded reconstructor"
			}
			fmt.Fprintf(c.Out, "%s over %s at %.0f Hz: %s, then %v closed loop\n", src.name, tr, src.rate, first, c.Duration)
			r, err := runOne(ctx, c, src, tr)
			if r != nil {
				out = append(out, *r)
			}
			if err != nil && ctx.Err() != nil {
				WriteTable(c.Out, out)
				return out, ErrInterrupted
			}
			if err != nil {
				return nil, fmt.Errorf("latency: %s over %s: %w", src.name, tr, err)
			}
		}
	}
	WriteTable(c.Out, out)
	return out, nil
}

// runOne measures one scenario on one transport. It returns a result marked
// Interrupted, with ctx's error, when ctx ends during the measurement.
func runOne(ctx context.Context, c Config, src source, transport string) (*Result, error) {
	// The parts run on a context of their own: an interrupted run still reads
	// the loop's figures before stopping them.
	simCtx, stopSim := context.WithCancel(context.Background())
	defer stopSim()
	period := 1 / src.rate
	capacity := int(c.Duration.Seconds()*src.rate*1.5) + 1000
	rec := daemon.NewRecorder(capacity)
	rc := rig.Config{
		Scenario: src.scn,
		Unix:     transport == "unix",
		Bench:    bench.Options{Logger: c.Logger.With("process", "sim"), StrehlEvery: 50, ReadoutTime: c.ReadoutTime, Prerendered: prerendered(c)},
		Loop: daemon.Config{
			MetricsAddr: "-", Chunks: c.Chunks, Recorder: rec, Kernel: c.Kernel, Realtime: c.Realtime,
			Logger: c.Logger.With("process", "loop"),
			// The benchmark measures the timing of the closed loop, so the loop must
			// stay closed through whatever the shared machine does to it: a low gain
			// keeps it stable under late frames, and the interlocks only watch for
			// gross failure.
			Gain:       &benchGain,
			Interlocks: daemon.Interlocks{DivergenceFactor: 1e6, SaturationFraction: 1, SaturationFrames: 1 << 30, StalePeriods: 1 << 20},
		},
	}
	var simDone chan error
	switch {
	case src.rec != nil && c.SimulatorExecutable == "":
		cam, mir, err := serveReplay(simCtx, src, transport, &simDone)
		if err != nil {
			return nil, err
		}
		rc.Devices = &rig.Devices{Camera: cam, Mirror: mir}
	case c.SimulatorExecutable != "":
		dir, err := os.MkdirTemp("", "stillsky-latency-")
		if err != nil {
			return nil, err
		}
		defer os.RemoveAll(dir)
		simDone = make(chan error, 1)
		cam, mir, err := startSimulator(simCtx, c, src, transport, dir, simDone)
		if err != nil {
			return nil, err
		}
		rc.Devices = &rig.Devices{Camera: cam, Mirror: mir}
	}
	r, err := rig.Start(simCtx, rc)
	if err != nil {
		return nil, err
	}
	defer r.Close()
	wait, cancel := context.WithTimeout(ctx, 30*time.Second)
	_, err = r.WaitFrames(wait, 10)
	cancel()
	if err != nil {
		return nil, err
	}
	if src.rec != nil {
		if _, err := ctl.Upload(ctx, r.Client, bytes.NewReader(src.rec.ReconstructorFile)); err != nil {
			return nil, fmt.Errorf("loading the recorded reconstructor: %w", err)
		}
	} else if _, err := r.Calibrate(ctx, &stillskyv1.CalibrateRequest{FramesPerPattern: 1}, nil); err != nil {
		return nil, fmt.Errorf("calibration: %w", err)
	}
	if _, err := r.Client.CloseLoop(ctx, &stillskyv1.CloseLoopRequest{}); err != nil {
		return nil, err
	}
	if err := sleep(ctx, 500*time.Millisecond); err != nil { // converge, warm caches
		return nil, err
	}
	blockLen := c.Block
	if blockLen == 0 {
		blockLen = time.Second
	}
	status, err := r.Status(ctx)
	if err != nil {
		return nil, err
	}
	blocks, s, floor, pairs, interrupted, err := interleaved(ctx, r, rec, int(status.GetSlopeCount()), int(status.GetActuatorCount()),
		time.Duration(period*float64(time.Second)), blockLen, c.Duration)
	if err != nil {
		return nil, err
	}
	after, err := r.Status(context.Background())
	if err != nil {
		return nil, err
	}
	if !interrupted && after.GetState() != stillskyv1.LoopState_LOOP_STATE_CLOSED {
		return nil, fmt.Errorf("the loop left the closed state during the run (now %v, last interlock %q)", after.GetState(), after.GetLastInterlock())
	}
	if err := r.StopLoop(); err != nil {
		return nil, err
	}
	if len(s.RTC) < 10 {
		if interrupted {
			return nil, ctx.Err()
		}
		return nil, fmt.Errorf("only %d frames recorded", len(s.RTC))
	}
	if err := r.Close(); err != nil && !interrupted {
		return nil, err
	}
	if simDone != nil {
		stopSim()
		if err := <-simDone; err != nil && !interrupted {
			return nil, err
		}
	}
	var dropped uint64
	var steal float64
	for _, b := range blocks {
		dropped += b.FramesDropped
		steal += b.StealPercent / float64(len(blocks))
	}

	res := &Result{
		Scenario: src.name, Transport: transport, RateHz: src.rate, Frames: len(s.RTC), Chunks: c.Chunks,
		ReadoutUs: float64(c.ReadoutTime.Microseconds()), MVMWorkers: c.Kernel.Workers, BFloat16: c.Kernel.Precision == mvm.BFloat16,
		SimCPUs: c.SimulatorCPUs, RTCPU: rtCPU(c.Realtime), RTFIFO: c.Realtime.FIFOPriority, RTSpinUs: float64(c.Realtime.Spin.Microseconds()),
		Slopes: int(after.GetSlopeCount()), Actuators: int(after.GetActuatorCount()),
		TransitUs: rig.QuantilesOf(s.Transit), ComputeUs: rig.QuantilesOf(s.Compute), RTCUs: rig.QuantilesOf(s.RTC), EndToEndUs: rig.QuantilesOf(s.EndToEnd),
		FloorUs: rig.QuantilesOf(floor), FramesDropped: dropped, StealPercent: math.Round(steal*10) / 10, PressurePercent: meanPressure(blocks),
		Camera: src.camera(c), BlockS: blockLen.Seconds(), Blocks: blocks, Quiet: compare(blocks, pairs),
		Interrupted: interrupted,
	}
	jitter := make([]int64, 0, len(s.Arrival))
	pns := int64(period * 1e9)
	for i := 1; i < len(s.Arrival); i++ {
		dt := s.Arrival[i] - s.Arrival[i-1]
		jitter = append(jitter, max(dt-pns, pns-dt))
	}
	res.ArrivalJitterUs = rig.QuantilesOf(jitter)
	for _, e := range s.EndToEnd {
		if e > pns {
			res.MissedDeadlines++
		}
	}
	if res.RTCUs.P99 > 0 {
		res.MaxRateHz = math.Round(1e6 / res.RTCUs.P99)
	}
	if interrupted {
		return res, ctx.Err()
	}
	return res, nil
}

// prerendered is the bench's Options.Prerendered for c.
func prerendered(c Config) int {
	if c.Camera == "prerendered" {
		return PrerenderedFrames
	}
	return 0
}

// sleep waits for d, or returns ctx's error when it ends first.
func sleep(ctx context.Context, d time.Duration) error {
	t := time.NewTimer(d)
	defer t.Stop()
	select {
	case <-ctx.Done():
		return ctx.Err()
	case <-t.C:
		return nil
	}
}

func rtCPU(r daemon.Realtime) int {
	if r.Pin {
		return r.CPU
	}
	return -1
}

// startSimulator runs the bench as its own process (`stillsky sim`), as the
// camera and mirror are separate devices on a real system: the loop's runtime
// then schedules only the loop.
func startSimulator(ctx context.Context, c Config, src source, transport, dir string, done chan<- error) (string, string, error) {
	cam, mir, err := deviceAddrs(transport, dir)
	if err != nil {
		return "", "", err
	}
	args := []string{"sim", "--replay", src.replay, "--camera", cam, "--mirror", mir, "--log-level", "warn"}
	if src.scn != nil {
		y, err := src.scn.YAML()
		if err != nil {
			return "", "", err
		}
		path := filepath.Join(dir, "scenario.yaml")
		if err := os.WriteFile(path, y, 0o644); err != nil {
			return "", "", err
		}
		args = []string{"sim", "--scenario", path, "--camera", cam, "--mirror", mir, "--metrics", "", "--log-level", "warn",
			"--readout-time", c.ReadoutTime.String()}
	}
	if n := prerendered(c); n > 0 && src.scn != nil {
		args = append(args, "--prerendered", fmt.Sprint(n))
	}
	if c.SimulatorCPUs != "" {
		args = append(args, "--cpus", c.SimulatorCPUs)
	}
	cmd := exec.CommandContext(ctx, c.SimulatorExecutable, args...)
	cmd.Stderr = os.Stderr
	if err := cmd.Start(); err != nil {
		return "", "", fmt.Errorf("starting the simulator: %w", err)
	}
	go func() {
		err := cmd.Wait()
		if ctx.Err() != nil {
			err = nil // stopped by us
		}
		done <- err
	}()
	return cam, mir, nil
}

// deviceAddrs chooses the camera's and the mirror's addresses for a transport:
// free loopback ports, or sockets in dir.
func deviceAddrs(transport, dir string) (string, string, error) {
	if transport == "unix" {
		return "unix:" + filepath.Join(dir, "camera.sock"), "unix:" + filepath.Join(dir, "mirror.sock"), nil
	}
	cam, err := freePort()
	if err != nil {
		return "", "", err
	}
	mir, err := freePort()
	return cam, mir, err
}

// camera names what feeds the loop.
func (s source) camera(c Config) string {
	switch {
	case s.rec != nil:
		return "replay"
	case c.Camera == "prerendered":
		return "prerendered"
	}
	return "simulated"
}

// replaySource reads and checks the recording of c.Replay.
func replaySource(c Config) (source, error) {
	if len(c.Scenarios) > 0 || c.Rate != 0 || c.Chunks > 1 {
		return source{}, errors.New("latency: --replay serves the recording as recorded: --scenario, --rate and --chunks do not apply")
	}
	rec, err := recording.ReadFile(c.Replay)
	if err != nil {
		return source{}, fmt.Errorf("latency: %w", err)
	}
	if rec.ReconstructorFile == nil {
		return source{}, fmt.Errorf("latency: %s: the recording holds no reconstructor (record with a calibrated loop)", c.Replay)
	}
	return source{name: "replay " + filepath.Base(c.Replay), rate: rec.Camera.GetFrameRateHz(), rec: rec, replay: c.Replay}, nil
}

// serveReplay serves the recording inside this process until ctx ends; its end
// is reported on *done.
func serveReplay(ctx context.Context, src source, transport string, done *chan error) (string, string, error) {
	dir, err := os.MkdirTemp("", "stillsky-replay-")
	if err != nil {
		return "", "", err
	}
	cam, mir, err := deviceAddrs(transport, dir)
	if err == nil {
		var r *bench.Replay
		var l *bench.Listeners
		if r, err = bench.NewReplay(src.rec, filepath.Base(src.replay), nil); err == nil {
			l, err = bench.Listen(bench.Addrs{Camera: cam, Mirror: mir})
		}
		if err == nil {
			*done = make(chan error, 1)
			go func() {
				err := r.Serve(ctx, l)
				os.RemoveAll(dir)
				*done <- err
			}()
			return cam, mir, nil
		}
	}
	os.RemoveAll(dir)
	return "", "", err
}

// freePort returns a loopback address no one listens on at the moment.
func freePort() (string, error) {
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		return "", err
	}
	defer l.Close()
	return l.Addr().String(), nil
}

// WriteJSON writes the results as a JSON array, atomically.
func WriteJSON(path string, rs []Result) error {
	b, err := json.MarshalIndent(rs, "", "  ")
	if err != nil {
		return err
	}
	return atomicfile.Write(path, func(w io.Writer) error {
		_, err := w.Write(append(b, '\n'))
		return err
	})
}

// percent formats a share that may be unknown (−1).
func percent(p float64) string {
	if p < 0 {
		return "n/a"
	}
	return fmt.Sprintf("%.1f %%", p)
}

// WriteTable prints the results as Markdown tables (µs): the figures over
// every block, then the comparison over the quiet pairs of blocks.
func WriteTable(w io.Writer, rs []Result) {
	fmt.Fprintln(w, "\n| scenario | transport | camera | rate | frames | camera→loop p50/p99 | compute p50/p99/p99.9/max | rtc p50/p99/p99.9/max | end-to-end p50/p99/p99.9/max | floor p50/p99 | arrival jitter p99 | missed | dropped | max rate | cpu steal | cpu pressure |")
	fmt.Fprintln(w, "| --- | --- | --- | --- | --- | --- | --- | --- | --- | --- | --- | --- | --- | --- | --- | --- |")
	f := func(q rig.Quantiles) string {
		return fmt.Sprintf("%.1f / %.1f / %.1f / %.1f", q.P50, q.P99, q.P999, q.Max)
	}
	for _, r := range rs {
		name := r.Scenario
		if r.Interrupted {
			name += " (interrupted)"
		}
		fmt.Fprintf(w, "| %s | %s | %s | %.0f Hz | %d | %.1f / %.1f | %s | %s | %s | %.1f / %.1f | %.1f | %d | %d | %.0f Hz | %.1f %% | %s |\n",
			name, r.Transport, r.Camera, r.RateHz, r.Frames, r.TransitUs.P50, r.TransitUs.P99, f(r.ComputeUs), f(r.RTCUs), f(r.EndToEndUs),
			r.FloorUs.P50, r.FloorUs.P99, r.ArrivalJitterUs.P99, r.MissedDeadlines, r.FramesDropped, r.MaxRateHz, r.StealPercent, percent(r.PressurePercent))
	}
	fmt.Fprintf(w, "\nPairs of blocks (loop, then floor) with cpu steal below %.0f %%; margin = end-to-end − (floor + compute):\n\n", QuietSteal)
	fmt.Fprintln(w, "| scenario | transport | camera | pairs | frames | cpu steal | cpu pressure | compute p50/p99 | floor p50/p99 | end-to-end p50/p99 | margin p50/p99 | missed |")
	fmt.Fprintln(w, "| --- | --- | --- | --- | --- | --- | --- | --- | --- | --- | --- | --- |")
	for _, r := range rs {
		q := r.Quiet
		if q == nil {
			fmt.Fprintf(w, "| %s | %s | %s | 0 of %d | | | | | | | | |\n", r.Scenario, r.Transport, r.Camera, len(r.Blocks)/2)
			continue
		}
		fmt.Fprintf(w, "| %s | %s | %s | %d of %d | %d | %.1f %% | %s | %.1f / %.1f | %.1f / %.1f | %.1f / %.1f | %+.1f / %+.1f | %d |\n",
			r.Scenario, r.Transport, r.Camera, q.Pairs, len(r.Blocks)/2, q.Frames, q.StealPercent, percent(q.PressurePercent), q.ComputeUs.P50, q.ComputeUs.P99,
			q.FloorUs.P50, q.FloorUs.P99, q.EndToEndUs.P50, q.EndToEndUs.P99, q.P50MarginUs, q.P99MarginUs, q.MissedDeadlines)
	}
}
