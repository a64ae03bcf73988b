package daemon

import (
	"errors"
	"fmt"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	"stillsky/controller"
)

var errNoReconstructor = errors.New("no reconstructor loaded: calibrate or load one first")

// Parameters: the control plane keeps the gain and leak (guarded by paramsMu,
// which also serialises installs), builds each parameter set off the hot path
// and hands it to the unit.

// setGainLeak changes the gain and/or the leak, validating first.
func (d *Daemon) setGainLeak(gain, leak *float64) error {
	d.paramsMu.Lock()
	defer d.paramsMu.Unlock()
	g, l := d.gain, d.leak
	if gain != nil {
		g = *gain
	}
	if leak != nil {
		l = *leak
	}
	if err := validGainLeak(g, l); err != nil {
		return status.Error(codes.InvalidArgument, err.Error())
	}
	if old := d.u.params(); old != nil {
		p, err := old.WithGain(g)
		if err == nil {
			var q *controller.Params
			q, err = p.WithLeak(l)
			p.Close()
			p = q
		}
		if err != nil {
			return status.Error(codes.InvalidArgument, err.Error())
		}
		if err := d.u.retune(p); err != nil {
			return err
		}
	}
	d.gain, d.leak = g, l
	d.m.gain.Set(g)
	d.m.leak.Set(l)
	d.log.Info("integrator set", "gain", g, "leak", l)
	d.persistSettings()
	return nil
}

func (d *Daemon) setModalGains(gains []float64) error {
	d.paramsMu.Lock()
	defer d.paramsMu.Unlock()
	old := d.u.params()
	if old == nil {
		return status.Error(codes.FailedPrecondition, errNoReconstructor.Error())
	}
	if n := old.Reconstructor().NumModes(); len(gains) != n {
		return status.Errorf(codes.InvalidArgument, "modal gains: %d values, want %d (one per controlled mode)", len(gains), n)
	}
	p, err := old.WithModalGains(gains)
	if err != nil {
		return status.Error(codes.InvalidArgument, err.Error())
	}
	return d.u.install(p)
}

// installReconstructor builds a parameter set on r and swaps it in.
func (d *Daemon) installReconstructor(r *controller.Reconstructor, persist bool) error {
	g := d.geometry()
	if g == nil {
		return status.Error(codes.FailedPrecondition, "devices not described yet: geometry unknown")
	}
	if r.Slopes != g.slopes || r.Actuators != g.actuators {
		return status.Errorf(codes.InvalidArgument, "reconstructor is %d slopes × %d actuators; the devices have %d × %d",
			r.Slopes, r.Actuators, g.slopes, g.actuators)
	}
	if d.u.wanted() == stateCalibrating {
		return status.Error(codes.FailedPrecondition, "cannot install a reconstructor while calibrating")
	}
	d.paramsMu.Lock()
	defer d.paramsMu.Unlock()
	p, err := controller.NewParams(controller.ParamsConfig{
		Reconstructor:    r,
		Gain:             d.gain,
		Leak:             d.leak,
		Stroke:           g.stroke,
		StrehlWavelength: d.cfg.ScienceWavelength,
		Kernel:           d.cfg.Kernel,
	})
	if err != nil {
		return status.Error(codes.InvalidArgument, err.Error())
	}
	if err := d.u.install(p); err != nil {
		return err
	}
	d.log.Info("reconstructor installed", "method", r.Method.String(), "modes_kept", r.ModesKept, "slopes", r.Slopes, "actuators", r.Actuators)
	if persist {
		d.persistReconstructor(r)
	}
	return nil
}

func validGainLeak(g, l float64) error {
	if !(g >= 0 && g < controller.MaxGain) {
		return fmt.Errorf("gain %g: must be in [0, %g)", g, controller.MaxGain)
	}
	if !(l >= 0 && l < 1) {
		return fmt.Errorf("leak %g: must be in [0, 1)", l)
	}
	return nil
}
