package daemon

import (
	"math"
	"slices"
	"sync/atomic"

	"stillsky/controller"
	stillskyv1 "stillsky/proto/stillsky/v1"
)

func rms32(v []float32) float64 {
	var s float64
	for _, x := range v {
		s += float64(x) * float64(x)
	}
	return math.Sqrt(s / float64(len(v)))
}

// runStats are the figures GetStatus reports, written by the real-time goroutine.
type runStats struct {
	frames, dropped, rejected, lastFrame atomic.Uint64
	slopeRMS, wavefrontRMS, strehl       atomicFloat
	flux                                 atomicFloat // guide-star flux of the newest frame, photo-electrons
	saturated                            atomic.Int64
	lastArrival                          atomic.Int64 // CLOCK_MONOTONIC ns of the newest frame
	rtc, e2e                             latencyWindow
	trips                                atomic.Uint64
	lastTripReason                       atomic.Pointer[string]
}

func (s *runStats) lastTrip() string {
	if p := s.lastTripReason.Load(); p != nil {
		return *p
	}
	return ""
}

func (s *runStats) store(r controller.Result) {
	s.slopeRMS.Store(r.SlopeRMS)
	s.wavefrontRMS.Store(r.ResidualRMS)
	s.strehl.Store(r.Strehl)
	s.saturated.Store(int64(r.Saturated))
}

type atomicFloat struct{ bits atomic.Uint64 }

func (f *atomicFloat) Store(v float64) { f.bits.Store(math.Float64bits(v)) }

func (f *atomicFloat) Load() float64 { return math.Float64frombits(f.bits.Load()) }

// latencyWindow keeps the most recent latencies (nanoseconds) for the status
// quantiles; one writer, readers copy.
type latencyWindow struct {
	n    atomic.Uint64
	ring [4096]atomic.Int64
}

func (w *latencyWindow) add(ns int64) {
	i := w.n.Add(1) - 1
	w.ring[i%uint64(len(w.ring))].Store(ns)
}

// summary returns quantiles over the window, in seconds.
func (w *latencyWindow) summary() *stillskyv1.LatencySummary {
	n := w.n.Load()
	k := min(n, uint64(len(w.ring)))
	if k == 0 {
		return &stillskyv1.LatencySummary{}
	}
	v := make([]int64, k)
	for i := range v {
		v[i] = w.ring[i].Load()
	}
	slices.Sort(v)
	q := func(p float64) float64 { return float64(v[int(p*float64(k-1)+0.5)]) * 1e-9 }
	return &stillskyv1.LatencySummary{P50: q(0.5), P99: q(0.99), P999: q(0.999), Max: float64(v[k-1]) * 1e-9, Count: n}
}
