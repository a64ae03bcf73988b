package scenario

import (
	"math"
	"time"
)

// Supervisor holds the thresholds of the unattended-operation supervisor
// (daemon/supervisor) that `stillsky demo --autonomous` runs the scenario's night
// with (YAML section "supervisor", optional; every key optional, with the
// supervisor's defaults). Fluxes are photo-electrons per frame summed over the
// sensor, as the camera reports them.
type Supervisor struct {
	// MinFlux is the least mean flux to close (min_flux_e, default 100, (0, 1e12]).
	MinFlux float64
	// LossFraction and ReturnFraction of the reference flux mark the flux as
	// lost and as back (loss_fraction, default 0.3, in (0, return_fraction);
	// return_fraction, default 0.6, (0, 1]).
	LossFraction, ReturnFraction float64
	// LossDwell and ReturnDwell are how long the flux must stay lost before the
	// loop is held and back before it is closed (loss_dwell_s, default 0.02,
	// [0, hold_timeout_s); return_dwell_s, default 0.2, [0, 2): the loop must
	// close again within 2 s of the flux returning).
	LossDwell, ReturnDwell time.Duration
	// HoldTimeout is the longest hold before the loop is opened (hold_timeout_s,
	// default 2, (0, 86400]).
	HoldTimeout time.Duration
	// LongPause is how long open before the reference flux is measured again
	// (long_pause_s, default 60, (hold_timeout_s, 604800]).
	LongPause time.Duration
	// MeasureWindow is the window of the reference flux (measure_window_s,
	// default 0.5, (0, 3600]).
	MeasureWindow time.Duration
	// RetryDelay is the wait after a failed calibration (retry_delay_s, default
	// 5, (0, 86400]).
	RetryDelay time.Duration
}

// DefaultSupervisor returns the supervisor's defaults (those of
// daemon/supervisor.DefaultConfig, which a test keeps equal).
func DefaultSupervisor() Supervisor {
	return Supervisor{MinFlux: 100, LossFraction: 0.3, ReturnFraction: 0.6,
		LossDwell: 20 * time.Millisecond, ReturnDwell: 200 * time.Millisecond, HoldTimeout: 2 * time.Second,
		LongPause: 60 * time.Second, MeasureWindow: 500 * time.Millisecond, RetryDelay: 5 * time.Second}
}

type rawSupervisor struct {
	MinFlux        *float64 `yaml:"min_flux_e"`
	LossFraction   *float64 `yaml:"loss_fraction"`
	ReturnFraction *float64 `yaml:"return_fraction"`
	LossDwell      *float64 `yaml:"loss_dwell_s"`
	ReturnDwell    *float64 `yaml:"return_dwell_s"`
	HoldTimeout    *float64 `yaml:"hold_timeout_s"`
	LongPause      *float64 `yaml:"long_pause_s"`
	MeasureWindow  *float64 `yaml:"measure_window_s"`
	RetryDelay     *float64 `yaml:"retry_delay_s"`
}

func seconds(d time.Duration) *float64 { s := d.Seconds(); return &s }

func (s *Supervisor) toRaw() *rawSupervisor {
	if s == nil {
		return nil
	}
	return &rawSupervisor{&s.MinFlux, &s.LossFraction, &s.ReturnFraction, seconds(s.LossDwell), seconds(s.ReturnDwell),
		seconds(s.HoldTimeout), seconds(s.LongPause), seconds(s.MeasureWindow), seconds(s.RetryDelay)}
}

// supervisor checks the supervisor section, each field by name.
func (c *checker) supervisor(r *rawSupervisor) *Supervisor {
	d := DefaultSupervisor()
	dur := func(at string, p *float64, sp span, def time.Duration) time.Duration {
		v := c.float("supervisor."+at, p, sp, " s", def.Seconds())
		return time.Duration(math.Round(v * 1e9))
	}
	s := &Supervisor{
		MinFlux:        c.float("supervisor.min_flux_e", r.MinFlux, openLow(0, 1e12), " photo-electrons per frame", d.MinFlux),
		ReturnFraction: c.float("supervisor.return_fraction", r.ReturnFraction, openLow(0, 1), " (of the reference flux)", d.ReturnFraction),
		HoldTimeout:    dur("hold_timeout_s", r.HoldTimeout, openLow(0, 86400), d.HoldTimeout),
		MeasureWindow:  dur("measure_window_s", r.MeasureWindow, openLow(0, 3600), d.MeasureWindow),
		RetryDelay:     dur("retry_delay_s", r.RetryDelay, openLow(0, 86400), d.RetryDelay),
		ReturnDwell:    dur("return_dwell_s", r.ReturnDwell, openHigh(0, 2), d.ReturnDwell),
	}
	if rf := s.ReturnFraction; rf > 0 {
		s.LossFraction = c.float("supervisor.loss_fraction", r.LossFraction, span{lo: 0, hi: rf, openLo: true, openHi: true}, " (of the reference flux; below return_fraction)", d.LossFraction)
	}
	if h := s.HoldTimeout.Seconds(); h > 0 {
		s.LossDwell = dur("loss_dwell_s", r.LossDwell, openHigh(0, h), d.LossDwell)
		s.LongPause = dur("long_pause_s", r.LongPause, openLow(h, 604800), d.LongPause)
	}
	return s
}
