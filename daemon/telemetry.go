package daemon

import (
	"context"
	"sync"
	"time"

	stillskyv1 "stillsky/proto/stillsky/v1"
)

// telemetryRing holds the newest frame's slopes, command and estimates for the
// telemetry stream and the live view. The real-time goroutine records with
// TryLock: when a reader holds the ring it skips that frame rather than wait.
type telemetryRing struct {
	mu     sync.Mutex
	sample telemetrySample
}

// telemetrySample is one frame as the real-time goroutine saw it.
type telemetrySample struct {
	frame                   uint64
	state                   loopState
	slopes, cmd             []float32
	slopeRMS, wfRMS, strehl float64
	saturated               int
	rtc                     float64
}

func (t *telemetryRing) init(slopes, actuators int) {
	t.mu.Lock()
	t.sample.slopes = make([]float32, slopes)
	t.sample.cmd = make([]float32, actuators)
	t.mu.Unlock()
}

// record copies one frame into the ring; it never blocks.
func (t *telemetryRing) record(num uint64, s loopState, slopes, cmd []float32, slopeRMS, wfRMS, strehl float64, saturated int, rtc float64) {
	if !t.mu.TryLock() {
		return
	}
	x := &t.sample
	if len(x.slopes) == len(slopes) && len(x.cmd) == len(cmd) {
		copy(x.slopes, slopes)
		copy(x.cmd, cmd)
		x.frame, x.state = num, s
		x.slopeRMS, x.wfRMS, x.strehl, x.saturated, x.rtc = slopeRMS, wfRMS, strehl, saturated, rtc
	}
	t.mu.Unlock()
}

// snapshot returns a copy of the newest sample.
func (t *telemetryRing) snapshot() *stillskyv1.StreamTelemetryResponse {
	t.mu.Lock()
	defer t.mu.Unlock()
	x := &t.sample
	return &stillskyv1.StreamTelemetryResponse{
		FrameNumber:           x.frame,
		State:                 x.state.proto(),
		Slopes:                append([]float32(nil), x.slopes...),
		Commands:              append([]float32(nil), x.cmd...),
		ResidualSlopeRmsRad:   x.slopeRMS,
		ResidualWavefrontRmsM: x.wfRMS,
		StrehlEstimate:        x.strehl,
		SaturatedActuators:    uint32(x.saturated),
		RtcLatencyS:           x.rtc,
	}
}

// stream sends every n-th frame number's sample until ctx ends. Frames are
// sampled by frame number, so a slow client gets fewer samples, never stale ones.
func (t *telemetryRing) stream(ctx context.Context, n uint64, send func(*stillskyv1.StreamTelemetryResponse) error) error {
	tick := time.NewTicker(500 * time.Microsecond)
	defer tick.Stop()
	var last uint64
	for {
		select {
		case <-ctx.Done():
			return nil
		case <-tick.C:
		}
		t.mu.Lock()
		num := t.sample.frame
		t.mu.Unlock()
		if num == 0 || num == last || num/n == last/n {
			continue
		}
		x := t.snapshot()
		last = x.FrameNumber
		if err := send(x); err != nil {
			return err
		}
	}
}
