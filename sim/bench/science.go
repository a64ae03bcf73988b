package bench

import (
	"context"
	"math"
	"runtime"
	"sync/atomic"

	"stillsky/internal/affinity"
	"stillsky/sim/optics"
)

// figures updates the true figures of merit after frame k (with maySample
// unset, the science camera skips the frame). Free-running, and
// in lockstep while the calibration source is on, the residual is formed on
// the frames the science camera samples only: on the others the geometric
// sensor never needs it, and the pokes of a calibration have no figure of
// merit worth the mirror surface per frame (which costs several times the
// frame itself on a mirror of thousands of actuators).
func (b *Server) figures(k uint64, maySample bool) {
	b.metrics.frames.Inc()
	sample := maySample && k%uint64(b.opt.StrehlEvery) == 0
	if !sample && (!b.opt.Lockstep || b.calibrationSource.Load()) {
		if !b.opt.Lockstep {
			b.stats.tick() // the frame still counts towards its one-second block
		}
		return
	}
	b.mu.Lock()
	rms := b.sys.ResidualRMS()
	async := sample && !b.opt.Lockstep && b.sci.busy.CompareAndSwap(false, true)
	if async {
		// Free-running, the science camera works on its own goroutine, so that
		// its FFT never delays the wavefront sensor's frames.
		copy(b.sci.in, b.sys.Residual())
		b.sci.wake <- struct{}{}
	}
	if sample && b.opt.Lockstep {
		// Lockstep runs are reproducible: every sampled frame is exposed.
		b.sys.PSF(b.psf)
	}
	b.mu.Unlock()
	b.stats.tick()
	b.stats.add(rms)
	b.metrics.residual.Set(rms)
	if sample && b.opt.Lockstep {
		b.expose(b.psf)
	}
}

// expose adds a science PSF to the window's exposure and the gauge's.
func (b *Server) expose(psf []float64) {
	b.stats.expose(psf)
	if b.sci.gauge.add(psf) >= b.sci.gaugeSamples {
		st := b.sci.gauge.strehl()
		b.metrics.strehl.Set(st)
		b.sci.lastStrehl.Store(math.Float64bits(st))
		b.setContrast(b.sci.gauge.contrastCurve(b.sys.PSFSize()))
		b.sci.gauge.reset()
	}
}

// science is the free-running science camera: it images the residuals that
// produce hands it, one at a time.
func (b *Server) science(ctx context.Context) {
	if b.opt.IdlePriority {
		runtime.LockOSThread()
		if err := affinity.IdleThread(); err != nil {
			b.log.Warn("science camera thread stays at normal priority", "err", err)
		}
	}
	for {
		select {
		case <-ctx.Done():
			return
		case <-b.sci.wake:
		}
		b.sci.imager.PSF(b.sci.in, b.sci.psf)
		b.expose(b.sci.psf)
		b.mu.Lock()
		copy(b.psf, b.sci.psf)
		b.mu.Unlock()
		b.sci.busy.Store(false)
	}
}

// scienceCamera images residual wavefronts at the science wavelength; free-running
// it works on a goroutine of its own, one residual at a time.
type scienceCamera struct {
	imager *optics.Imager
	in     []float64 // residual handed to the camera (free-run)
	psf    []float64
	busy   atomic.Bool
	wake   chan struct{}
	// gauge is the last second's exposure, for the Strehl gauge, of
	// gaugeSamples PSFs; lastStrehl the float64 bits of its last value.
	gauge        exposure
	gaugeSamples int
	lastStrehl   atomic.Uint64
	// lastContrast is the gauge's last raw contrast at ContrastSeparations.
	lastContrast contrastGauge
}

// exposure sums PSFs, as a science camera integrates.
type exposure struct {
	sum []float64
	n   int
}

func (e *exposure) add(psf []float64) int {
	for i, v := range psf {
		e.sum[i] += v
	}
	e.n++
	return e.n
}

// strehl returns the peak of the mean PSF (the diffraction-limited peak is 1).
func (e *exposure) strehl() float64 {
	if e.n == 0 {
		return 0
	}
	peak := 0.0
	for _, v := range e.sum {
		peak = max(peak, v)
	}
	return peak / float64(e.n)
}

func (e *exposure) reset() {
	clear(e.sum)
	e.n = 0
}
