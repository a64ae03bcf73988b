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
	use, off := r, (*controller.TiltOffload)(nil)
	if tt := d.u.tt; tt != nil {
		use, off = d.tipTiltReconstructor(r, g)
	}
	p, err := controller.NewParams(controller.ParamsConfig{
		Reconstructor:    use,
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
	if tt := d.u.tt; tt != nil {
		tt.offload.Store(off)
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

// tipTiltReconstructor returns, for a daemon with a tip-tilt loop, the
// reconstructor that ignores the main sensor's tip-tilt (the tip-tilt sensor
// measures it) and the offload of the deformable mirror's tip-tilt, whose
// tilt response is measured on r itself; without a usable response (r
// corrects no tilt) there is no offload, which the log says.
func (d *Daemon) tipTiltReconstructor(r *controller.Reconstructor, g *geometry) (*controller.Reconstructor, *controller.TiltOffload) {
	filtered := r.WithoutSlopeTilt()
	pos := make([][2]float64, len(g.positions)/2)
	for k := range pos {
		pos[k] = [2]float64{g.positions[2*k], g.positions[2*k+1]}
	}
	if len(pos) != r.Actuators {
		d.log.Warn("no tip-tilt offload: the mirror describes no actuator positions", "positions", len(pos), "actuators", r.Actuators)
		return filtered, nil
	}
	rho, err := controller.TiltResponse(r, pos)
	if err != nil {
		d.log.Warn("no tip-tilt offload", "err", err)
		return filtered, nil
	}
	off, err := controller.NewTiltOffload(pos, d.u.tt.cfg.OffloadGain, rho)
	if err != nil {
		d.log.Warn("no tip-tilt offload", "err", err)
		return filtered, nil
	}
	d.log.Info("tip-tilt offload", "tilt_response_rad_per_m_per_m", rho, "fraction", d.u.tt.cfg.OffloadGain)
	return filtered, off
}
