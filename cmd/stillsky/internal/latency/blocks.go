package latency

import (
	"context"
	"math"
	"time"

	"google.golang.org/grpc"

	"stillsky/daemon"
	"stillsky/internal/cpustat"
	"stillsky/internal/monoclock"
	"stillsky/internal/rpc"
	stillskyv1 "stillsky/proto/stillsky/v1"
	"stillsky/rig"
)

// QuietSteal is the CPU steal, percent, below which a pair of blocks counts
// as quiet: the comparison of the loop with its floor uses quiet pairs only.
const QuietSteal = 5.0

// pressureFile is the kernel's CPU pressure stall information (PSI).
const pressureFile = "/proc/pressure/cpu"

// settle is how long a block waits after the camera resumes or pauses: the
// first frame after a pause carries the gap in frame numbers, and the frames
// in flight when it pauses are answered before the floor is measured.
const settle = 20 * time.Millisecond

// Block is one block of the interleaved measurement: the closed loop
// ("loop"), or the transport floor with the camera paused ("floor").
type Block struct {
	Kind string `json:"kind"`
	// StartS is when the block began, seconds after the first block began.
	StartS       float64 `json:"start_s"`
	StealPercent float64 `json:"cpu_steal_percent"`
	// PressurePercent is the share of the block's wall time in which some
	// runnable task of the machine waited for a CPU (PSI "some",
	// /proc/pressure/cpu), −1 when it cannot be read: the contention that
	// steal does not show.
	PressurePercent float64 `json:"cpu_pressure_percent"`
	// Samples counts the block's frames (loop) or round trips (floor).
	Samples int `json:"samples"`
	// Loop blocks: latencies of the frames read out during the block, and of
	// the commands answering them, µs.
	ComputeUs       *rig.Quantiles `json:"compute_us,omitempty"`
	EndToEndUs      *rig.Quantiles `json:"end_to_end_us,omitempty"`
	MissedDeadlines int            `json:"missed_deadlines,omitempty"`
	FramesDropped   uint64         `json:"frames_dropped,omitempty"`
	// Floor blocks: the round trips, µs.
	FloorUs *rig.Quantiles `json:"floor_us,omitempty"`
}

// Comparison sets the loop against its floor over the quiet pairs of blocks
// (a loop block and the floor block after it, both with steal below
// QuietSteal). The margins are end-to-end − (floor + compute), µs, at the
// median and at p99: what the loop adds beyond its transport and its compute.
type Comparison struct {
	Pairs           int           `json:"pairs"`
	Frames          int           `json:"frames"`
	StealPercent    float64       `json:"cpu_steal_percent"`    // mean over the pairs' blocks
	PressurePercent float64       `json:"cpu_pressure_percent"` // mean over the pairs' blocks, −1 unread
	ComputeUs       rig.Quantiles `json:"compute_us"`
	EndToEndUs      rig.Quantiles `json:"end_to_end_us"`
	FloorUs         rig.Quantiles `json:"floor_us"`
	MissedDeadlines int           `json:"missed_deadlines"`
	P50MarginUs     float64       `json:"p50_margin_us"`
	P99MarginUs     float64       `json:"p99_margin_us"`
}

// pairSamples are the samples of one pair of blocks, ns.
type pairSamples struct {
	compute, e2e, floor []int64
}

// interleaved measures the closed loop of r and the transport floor in
// alternating blocks of length block, loop time totalling duration: a loop
// block with the camera streaming, then a floor block with the camera paused
// and a bare ping-pong of the same payloads against the bench's probe, over a
// connection opened once, between the same two processes. It returns the
// blocks with the samples of each, the whole run's samples (loop blocks
// only), the floor's round trips and each pair's samples.
// When ctx ends first, it keeps the pairs completed and reports interrupted.
func interleaved(ctx context.Context, r *rig.Rig, rec *daemon.Recorder, slopes, actuators int, period, block, duration time.Duration) (blocks []Block, loop daemon.Samples, floor []int64, pairs []pairSamples, interrupted bool, err error) {
	bg := context.Background() // the devices are driven to the end, even when ctx ends
	conn, err := rpc.Dial(r.Devices.Camera, rpc.DeviceDialOptions()...)
	if err != nil {
		return nil, loop, nil, nil, false, err
	}
	defer conn.Close()
	camera := stillskyv1.NewCameraServiceClient(conn)
	acquire := func(paused bool) error {
		_, err := camera.SetAcquisition(bg, &stillskyv1.SetAcquisitionRequest{Paused: paused})
		return err
	}
	probe, err := newPinger(bg, conn, slopes, actuators, period)
	if err != nil {
		return nil, loop, nil, nil, false, err
	}
	defer probe.close()
	type window struct{ t0, t1 int64 }
	var windows []window
	var floors [][]int64
	begin := monoclock.Now()
	rec.Start()
	for done := time.Duration(0); done < duration && !interrupted; done += block {
		d := min(block, duration-done)
		if err := acquire(false); err != nil {
			return nil, loop, nil, nil, false, err
		}
		sleep(bg, settle)
		st0, err := r.Status(bg)
		if err != nil {
			return nil, loop, nil, nil, false, err
		}
		c0, e0 := cpustat.Read("/proc/stat")
		p0, pe0 := cpustat.ReadPressure(pressureFile)
		t0 := monoclock.Now()
		if sleep(ctx, d) != nil {
			interrupted = true
			break
		}
		t1 := monoclock.Now()
		c1, e1 := cpustat.Read("/proc/stat")
		p1, pe1 := cpustat.ReadPressure(pressureFile)
		st1, err := r.Status(bg)
		if err != nil {
			return nil, loop, nil, nil, false, err
		}
		windows = append(windows, window{t0, t1})
		blocks = append(blocks, Block{Kind: "loop", StartS: float64(t0-begin) * 1e-9, StealPercent: cpustat.StealPercent(c0, c1, e0, e1),
			PressurePercent: cpustat.PressurePercent(p0, p1, pe0, pe1, t1-t0),
			FramesDropped:   st1.GetFramesDropped() - st0.GetFramesDropped()})
		if err := acquire(true); err != nil {
			return nil, loop, nil, nil, false, err
		}
		sleep(bg, settle)
		c0, e0 = cpustat.Read("/proc/stat")
		p0, pe0 = cpustat.ReadPressure(pressureFile)
		f0 := monoclock.Now()
		rtt, err := probe.run(d)
		if err != nil {
			return nil, loop, nil, nil, false, err
		}
		f1 := monoclock.Now()
		c1, e1 = cpustat.Read("/proc/stat")
		p1, pe1 = cpustat.ReadPressure(pressureFile)
		floors = append(floors, rtt)
		blocks = append(blocks, Block{Kind: "floor", StartS: float64(f0-begin) * 1e-9, StealPercent: cpustat.StealPercent(c0, c1, e0, e1),
			PressurePercent: cpustat.PressurePercent(p0, p1, pe0, pe1, f1-f0), Samples: len(rtt)})
	}
	// The mirror acknowledges in batches of a quarter second of commands:
	// stream once more, unrecorded by the windows, so that the last block's
	// acknowledgements come in.
	if err := acquire(false); err != nil {
		return nil, loop, nil, nil, false, err
	}
	sleep(bg, 500*time.Millisecond)
	rec.Stop()
	all := rec.Samples()
	pns := period.Nanoseconds()
	for i, w := range windows {
		in := func(readout int64) bool { return readout >= w.t0 && readout < w.t1 }
		var compute, rtc, e2e []int64
		for j := range all.RTC {
			if readout := all.Arrival[j] - all.Transit[j]; in(readout) {
				compute = append(compute, all.Compute[j])
				rtc = append(rtc, all.RTC[j])
				loop.Arrival = append(loop.Arrival, all.Arrival[j])
				loop.Transit = append(loop.Transit, all.Transit[j])
			}
		}
		for j, e := range all.EndToEnd {
			if in(all.EndToEndReadout[j]) {
				e2e = append(e2e, e)
			}
		}
		b := &blocks[2*i]
		b.Samples = len(compute)
		qc, qe := rig.QuantilesOf(compute), rig.QuantilesOf(e2e)
		b.ComputeUs, b.EndToEndUs = &qc, &qe
		for _, e := range e2e {
			if e > pns {
				b.MissedDeadlines++
			}
		}
		qf := rig.QuantilesOf(floors[i])
		blocks[2*i+1].FloorUs = &qf
		loop.Compute = append(loop.Compute, compute...)
		loop.RTC = append(loop.RTC, rtc...)
		loop.EndToEnd = append(loop.EndToEnd, e2e...)
		floor = append(floor, floors[i]...)
		pairs = append(pairs, pairSamples{compute, e2e, floors[i]})
	}
	return blocks, loop, floor, pairs, interrupted, nil
}

// compare sets the loop against its floor over the quiet pairs of blocks
// (blocks[2i] and blocks[2i+1], whose samples are pairs[i]); nil when no pair
// was quiet.
func compare(blocks []Block, pairs []pairSamples) *Comparison {
	var compute, e2e, floor []int64
	c := &Comparison{}
	var steal float64
	var quietBlocks []Block
	for i, p := range pairs {
		lb, fb := blocks[2*i], blocks[2*i+1]
		if !quiet(lb) || !quiet(fb) {
			continue
		}
		c.Pairs++
		quietBlocks = append(quietBlocks, lb, fb)
		steal += lb.StealPercent + fb.StealPercent
		compute = append(compute, p.compute...)
		e2e = append(e2e, p.e2e...)
		floor = append(floor, p.floor...)
		c.MissedDeadlines += lb.MissedDeadlines
	}
	if c.Pairs == 0 {
		return nil
	}
	c.Frames = len(compute)
	c.StealPercent = math.Round(steal/float64(2*c.Pairs)*10) / 10
	c.PressurePercent = meanPressure(quietBlocks)
	c.ComputeUs, c.EndToEndUs, c.FloorUs = rig.QuantilesOf(compute), rig.QuantilesOf(e2e), rig.QuantilesOf(floor)
	c.P50MarginUs = math.Round((c.EndToEndUs.P50-c.FloorUs.P50-c.ComputeUs.P50)*10) / 10
	c.P99MarginUs = math.Round((c.EndToEndUs.P99-c.FloorUs.P99-c.ComputeUs.P99)*10) / 10
	return c
}

// meanPressure is the blocks' mean CPU pressure, percent to one decimal, or
// −1 when any block's could not be read.
func meanPressure(blocks []Block) float64 {
	if len(blocks) == 0 {
		return -1
	}
	var sum float64
	for _, b := range blocks {
		if b.PressurePercent < 0 {
			return -1
		}
		sum += b.PressurePercent
	}
	return math.Round(sum/float64(len(blocks))*10) / 10
}

// quiet reports whether a block's steal was read and below QuietSteal.
func quiet(b Block) bool { return b.StealPercent >= 0 && b.StealPercent < QuietSteal }

// pinger runs the transport floor's ping-pong on one probe stream.
type pinger struct {
	stream grpc.BidiStreamingClient[stillskyv1.EchoRequest, stillskyv1.EchoResponse]
	req    *stillskyv1.EchoRequest
	resp   *stillskyv1.EchoResponse
	period time.Duration
}

// newPinger opens the probe stream on conn and warms it with 100 round trips
// of a slope frame out and a command back.
func newPinger(ctx context.Context, conn grpc.ClientConnInterface, slopes, actuators int, period time.Duration) (*pinger, error) {
	stream, err := stillskyv1.NewTransportProbeServiceClient(conn).Echo(ctx)
	if err != nil {
		return nil, err
	}
	p := &pinger{stream: stream, period: period, resp: &stillskyv1.EchoResponse{},
		req: &stillskyv1.EchoRequest{Values: make([]float32, slopes), ReplyValues: uint32(actuators)}}
	for i := range p.req.Values {
		p.req.Values[i] = float32(i) * 1e-7 // non-zero, like slopes
	}
	if _, err := p.pings(100); err != nil {
		return nil, err
	}
	return p, nil
}

// run pings once per frame period for d and returns the round trips, ns.
func (p *pinger) run(d time.Duration) ([]int64, error) {
	return p.pings(int(d / p.period))
}

func (p *pinger) pings(n int) ([]int64, error) {
	rtt := make([]int64, 0, n)
	next := time.Now()
	for range n {
		next = next.Add(p.period)
		if d := time.Until(next); d > 0 {
			time.Sleep(d)
		}
		t0 := monoclock.Now()
		if err := p.stream.Send(p.req); err != nil {
			return nil, err
		}
		if err := p.stream.RecvMsg(p.resp); err != nil {
			return nil, err
		}
		rtt = append(rtt, monoclock.Now()-t0)
	}
	return rtt, nil
}

func (p *pinger) close() { p.stream.CloseSend() }
