package bench

import (
	"context"
	"fmt"
	"sync"
	"time"
)

// skyGate holds a lockstep bench before a given sky frame, so that a driver
// (the demo) can end a phase on an exact frame: frames are counted on the sky
// only, since only they move the turbulence and draw sensor noise, and the
// calibration source's frames, however many a calibration and its source
// switches take, pass freely.
type skyGate struct {
	mu    sync.Mutex    // guards the fields below and orders source switches against frames
	sky   uint64        // sky frames produced
	limit uint64        // the sky frames allowed; ^0 when open
	held  bool          // the bench waits at the limit
	last  uint64        // the number of the last frame produced
	wake  chan struct{} // a new limit or a source switch
}

// HoldAfter lets a lockstep bench produce sky frames up to the n-th (counted
// from the bench's start) and hold before the next, until HoldAfter is called
// again with a larger n. It is for lockstep benches built with Options.Gated.
func (b *Server) HoldAfter(n uint64) {
	b.gate.mu.Lock()
	b.gate.limit = n
	if n > b.gate.sky {
		b.gate.held = false
	}
	b.gate.mu.Unlock()
	b.wakeGate()
}

// WaitHeld waits until a gated lockstep bench holds at its limit with the
// mirror's command for its last frame arrived, so that the loop has answered
// every frame produced; it returns the number of the last frame and the sky
// frames produced.
func (b *Server) WaitHeld(ctx context.Context) (last, sky uint64, err error) {
	if !b.opt.Gated {
		return 0, 0, fmt.Errorf("bench: WaitHeld on a bench without Options.Gated")
	}
	t := time.NewTicker(time.Millisecond)
	defer t.Stop()
	for {
		b.gate.mu.Lock()
		held, limit := b.gate.held, b.gate.limit
		last, sky = b.gate.last, b.gate.sky
		b.gate.mu.Unlock()
		if held && b.mir.lastFrame.Load() >= last {
			return last, sky, nil
		}
		select {
		case <-ctx.Done():
			return 0, 0, fmt.Errorf("bench: waiting for the hold at sky frame %d: %w", limit, ctx.Err())
		case <-t.C:
		}
	}
}

func (b *Server) wakeGate() {
	select {
	case b.gate.wake <- struct{}{}:
	default:
	}
}

// gated produces lockstep frame k through produce, first waiting while the
// sky is selected and the gate's limit is reached.
func (b *Server) gated(ctx context.Context, k uint64) error {
	g := &b.gate
	for {
		g.mu.Lock()
		sky := !b.calibrationSource.Load()
		if !sky || g.sky < g.limit {
			g.held = false
			if sky {
				g.sky++
			}
			b.produce(k, g.sky, sky)
			g.last = k
			g.mu.Unlock()
			return nil
		}
		g.held = true
		g.mu.Unlock()
		select {
		case <-ctx.Done():
			return ctx.Err()
		case <-g.wake:
		case <-time.After(10 * time.Millisecond):
		}
	}
}
