package daemon

import (
	"fmt"
	"math"
	"time"

	"github.com/prometheus/client_golang/prometheus"

	"stillsky/controller"
	"stillsky/internal/monoclock"
)

// Interlocks are the safety limits the real-time goroutine enforces. Zero values
// take the defaults given with each field.
type Interlocks struct {
	// DivergenceFactor trips the loop when the closed-loop slope rms, averaged over
	// about 20 frames, exceeds this multiple of the open-loop slope rms measured
	// just before closing (default 3). A stable loop only ever reduces it.
	DivergenceFactor float64
	// SaturationFraction and SaturationFrames trip the loop when more than this
	// fraction of the actuators has been clipped for this many frames in a row
	// (defaults 0.25 and 50).
	SaturationFraction float64
	SaturationFrames   int
	// StalePeriods holds the mirror when no frame has arrived for this many frame
	// periods while the loop is closed (default 20).
	StalePeriods int
	// TripDecay, in (0, 1), makes the safe shape after a trip a decay of the last
	// command sent: each frame the command is multiplied by 1 − TripDecay; 0 sends
	// the mirror flat at once.
	TripDecay float64
}

func (c *Interlocks) setDefaults() error {
	if c.DivergenceFactor == 0 {
		c.DivergenceFactor = 3
	}
	if c.SaturationFraction == 0 {
		c.SaturationFraction = 0.25
	}
	if c.SaturationFrames == 0 {
		c.SaturationFrames = 50
	}
	if c.StalePeriods == 0 {
		c.StalePeriods = 20
	}
	switch {
	case !(c.DivergenceFactor > 1) || math.IsInf(c.DivergenceFactor, 0):
		return fmt.Errorf("daemon: divergence factor %g: must be finite and > 1", c.DivergenceFactor)
	case !(c.SaturationFraction > 0 && c.SaturationFraction <= 1):
		return fmt.Errorf("daemon: saturation fraction %g: must be in (0, 1]", c.SaturationFraction)
	case c.SaturationFrames < 1:
		return fmt.Errorf("daemon: saturation frames %d: must be >= 1", c.SaturationFrames)
	case c.StalePeriods < 2:
		return fmt.Errorf("daemon: stale periods %d: must be >= 2", c.StalePeriods)
	case !(c.TripDecay >= 0 && c.TripDecay < 1):
		return fmt.Errorf("daemon: trip decay %g: must be in [0, 1)", c.TripDecay)
	}
	return nil
}

// guard is the interlock state of the real-time goroutine.
type guard struct {
	cfg Interlocks
	// openRMS is an average of the slope rms while open, the turbulence level the
	// closed loop must stay below.
	openRMS    float64
	ref        float64 // the level the closed loop must stay below
	closedRMS  float64
	closedN    int
	saturatedN int
}

// observeOpen tracks the open-loop slope rms (exponential average over ~50 frames).
func (g *guard) observeOpen(rms float64) {
	if g.openRMS == 0 {
		g.openRMS = rms
	} else {
		g.openRMS += (rms - g.openRMS) / 50
	}
}

// opening forgets the open-loop level: the sky may have changed (or a
// calibration source been in the beam) since the loop was last open.
func (g *guard) opening() { g.openRMS = 0 }

// closing resets the closed-loop averages.
func (g *guard) closing() {
	g.closedRMS, g.closedN, g.saturatedN = 0, 0, 0
}

// check returns the reason to trip after a closed-loop frame, or "".
func (g *guard) check(res controller.Result, actuators int) string {
	if float64(res.Saturated) > g.cfg.SaturationFraction*float64(actuators) {
		g.saturatedN++
		if g.saturatedN >= g.cfg.SaturationFrames {
			return tripSaturation
		}
	} else {
		g.saturatedN = 0
	}
	g.closedN++
	if g.closedN == 1 {
		// The first closed frame is still uncorrected: it measures the sky too, and
		// guards against an open-loop average taken on a calibration source.
		g.closedRMS = res.SlopeRMS
		g.ref = max(g.openRMS, res.SlopeRMS)
	} else {
		g.closedRMS += (res.SlopeRMS - g.closedRMS) / 20
	}
	if g.ref > 0 && g.closedN > 20 && g.closedRMS > g.cfg.DivergenceFactor*g.ref {
		return tripDivergence
	}
	return ""
}

// trip records an interlock: counted, logged, visible in the status.
func (u *unit) trip(reason string) {
	var c prometheus.Counter
	switch reason {
	case tripDivergence:
		c = u.m.tripDiv
	case tripSaturation:
		c = u.m.tripSat
	case tripStaleCamera:
		c = u.m.tripStale
	case tripTipTiltStale:
		c = u.m.tripTTStale
	case tripTipTiltSaturation:
		c = u.m.tripTTSat
	case tripTipTiltUnreachable:
		c = u.m.tripTTMirror
	default:
		c = u.m.tripMirror
	}
	c.Inc()
	u.stats.trips.Add(1)
	r := reason
	u.stats.lastTripReason.Store(&r)
	// Logging allocates; a trip ends closed-loop operation, so it is off the
	// steady-state hot path.
	u.log.Warn("safety interlock tripped", "reason", reason)
}

// watchdog holds the loop when the camera goes quiet while the loop is closed.
func (u *unit) watchdog(done <-chan struct{}, period, stale time.Duration) {
	t := time.NewTicker(period)
	defer t.Stop()
	for {
		select {
		case <-done:
			return
		case <-t.C:
		}
		last := u.stats.lastArrival.Load()
		if last == 0 || u.wanted() != stateClosed {
			continue
		}
		if quiet := time.Duration(monoclock.Now() - last); quiet > stale && u.holdIfClosed() {
			u.trip(tripStaleCamera)
		}
	}
}
