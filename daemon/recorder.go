package daemon

import "sync/atomic"

// Recorder keeps the timings of every frame during a measurement window, in
// arrays allocated up front, so that a latency benchmark reports exact quantiles
// rather than histogram buckets. Attach it with Config.Recorder.
type Recorder struct {
	on                    atomic.Bool
	n, ne                 atomic.Int64
	arrival, compute, rtc []atomic.Int64
	transit, e2e          []atomic.Int64
	e2eReadout            []atomic.Int64
}

// NewRecorder returns a recorder for up to capacity frames.
func NewRecorder(capacity int) *Recorder {
	return &Recorder{
		arrival: make([]atomic.Int64, capacity),
		compute: make([]atomic.Int64, capacity),
		rtc:     make([]atomic.Int64, capacity),
		transit: make([]atomic.Int64, capacity),
		e2e:     make([]atomic.Int64, capacity),

		e2eReadout: make([]atomic.Int64, capacity),
	}
}

// Start begins (or resumes) recording.
func (r *Recorder) Start() { r.on.Store(true) }

// Stop ends recording.
func (r *Recorder) Stop() { r.on.Store(false) }

func (r *Recorder) frame(arrival, transit, compute, rtc int64) {
	if !r.on.Load() {
		return
	}
	if i := r.n.Add(1) - 1; i < int64(len(r.rtc)) {
		r.arrival[i].Store(arrival)
		r.transit[i].Store(transit)
		r.compute[i].Store(compute)
		r.rtc[i].Store(rtc)
	}
}

// endToEnd records the end-to-end latency ns of the command answering the
// frame read out at readout: acknowledgements come in batches, well after
// their frames, and a benchmark that measures in blocks attributes each to
// its frame's block.
func (r *Recorder) endToEnd(readout, ns int64) {
	if !r.on.Load() {
		return
	}
	if i := r.ne.Add(1) - 1; i < int64(len(r.e2e)) {
		r.e2e[i].Store(ns)
		r.e2eReadout[i].Store(readout)
	}
}

// Samples are the recorded timings in nanoseconds: frame arrival times
// (CLOCK_MONOTONIC), the camera-to-loop transit (readout end to arrival), compute
// and rtc latency per frame, and end-to-end latency per acknowledged command
// with the readout time of the frame it answered (CLOCK_MONOTONIC; in the
// order the acknowledgements came).
type Samples struct {
	Arrival, Transit, Compute, RTC, EndToEnd []int64
	EndToEndReadout                          []int64
}

// Samples copies what has been recorded.
func (r *Recorder) Samples() Samples {
	load := func(a []atomic.Int64, n int64) []int64 {
		n = min(n, int64(len(a)))
		out := make([]int64, n)
		for i := range out {
			out[i] = a[i].Load()
		}
		return out
	}
	n, ne := r.n.Load(), r.ne.Load()
	return Samples{Arrival: load(r.arrival, n), Transit: load(r.transit, n), Compute: load(r.compute, n), RTC: load(r.rtc, n),
		EndToEnd: load(r.e2e, ne), EndToEndReadout: load(r.e2eReadout, ne)}
}
