package daemon

import (
	"errors"
	"fmt"
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	"stillsky/controller"
)

var errNoReconstructor = errors.New("no reconstructor loaded: calibrate or load one first")

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
	if loop := d.loopPtr.Load(); loop != nil {
		old := loop.Params()
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
		if err := loop.SetParams(p); err != nil {
			p.Close()
			return status.Error(codes.Internal, err.Error())
		}
		d.retire(old)
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
	loop := d.loopPtr.Load()
	if loop == nil {
		return status.Error(codes.FailedPrecondition, errNoReconstructor.Error())
	}
	old := loop.Params()
	if n := old.Reconstructor().NumModes(); len(gains) != n {
		return status.Errorf(codes.InvalidArgument, "modal gains: %d values, want %d (one per controlled mode)", len(gains), n)
	}
	p, err := old.WithModalGains(gains)
	if err != nil {
		return status.Error(codes.InvalidArgument, err.Error())
	}
	return d.swap(p, old)
}

// swap installs p on the loop and the matching gain-0 set on the estimator.
// paramsMu must be held.
func (d *Daemon) swap(p *controller.Params, old *controller.Params) error {
	est, err := p.WithGain(0)
	if err != nil {
		p.Close()
		return status.Error(codes.Internal, err.Error())
	}
	loop, eloop := d.loopPtr.Load(), d.estimator.Load()
	if loop == nil {
		if loop, err = controller.NewLoop(p); err != nil {
			return status.Error(codes.Internal, err.Error())
		}
		if eloop, err = controller.NewLoop(est); err != nil {
			return status.Error(codes.Internal, err.Error())
		}
		d.loopPtr.Store(loop)
		d.estimator.Store(eloop)
		return nil
	}
	oldEst := eloop.Params()
	if err := loop.SetParams(p); err != nil {
		p.Close()
		est.Close()
		return status.Errorf(codes.InvalidArgument, "%v", err)
	}
	if err := eloop.SetParams(est); err != nil {
		est.Close()
		return status.Error(codes.Internal, err.Error())
	}
	d.retire(old, oldEst)
	return nil
}

// retire closes parameter sets once the real-time goroutine can no longer be
// stepping with them: a frame in progress keeps the set it started with.
func (d *Daemon) retire(ps ...*controller.Params) {
	start := d.stats.frames.Load()
	go func() {
		deadline := time.Now().Add(time.Second)
		for d.stats.frames.Load() < start+2 && time.Now().Before(deadline) {
			time.Sleep(time.Millisecond)
		}
		for _, p := range ps {
			if p != nil {
				p.Close()
			}
		}
	}()
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
	if loopState(d.want.Load()) == stateCalibrating {
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
	var old *controller.Params
	if loop := d.loopPtr.Load(); loop != nil {
		old = loop.Params()
	}
	if err := d.swap(p, old); err != nil {
		return err
	}
	d.log.Info("reconstructor installed", "method", r.Method.String(), "modes_kept", r.ModesKept, "slopes", r.Slopes, "actuators", r.Actuators)
	if persist {
		d.persistReconstructor(r)
	}
	return nil
}

func (d *Daemon) reconstructor() *controller.Reconstructor {
	if loop := d.loopPtr.Load(); loop != nil {
		return loop.Params().Reconstructor()
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
