package bench

import (
	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/promauto"

	"stillsky/internal/buildinfo"
)

// Registry returns the bench's own Prometheus registry: what only the simulator
// knows (true residual, true Strehl) and its frame counters.
func (b *Server) Registry() *prometheus.Registry { return b.metrics.reg }

type benchMetrics struct {
	reg                                          *prometheus.Registry
	frames, framesLost, commands, ttCommands     prometheus.Counter
	commandsRejected, lockstepTimeouts           prometheus.Counter
	residual, strehl, wavelength, framePeriodGau prometheus.Gauge
	contrast                                     *prometheus.GaugeVec
}

func newBenchMetrics(wavelength, period float64) *benchMetrics {
	m := &benchMetrics{reg: prometheus.NewRegistry()}
	f := promauto.With(m.reg)
	counter := func(name, help string) prometheus.Counter {
		return f.NewCounter(prometheus.CounterOpts{Name: name, Help: help})
	}
	gauge := func(name, help string) prometheus.Gauge {
		return f.NewGauge(prometheus.GaugeOpts{Name: name, Help: help})
	}
	m.frames = counter("stillsky_bench_frames_total", "Frames simulated by the bench.")
	m.framesLost = counter("stillsky_bench_frames_lost_total", "Frames discarded because the camera consumer fell behind.")
	m.commands = counter("stillsky_bench_commands_total", "Mirror commands applied.")
	m.ttCommands = counter("stillsky_bench_tip_tilt_commands_total", "Tip-tilt mirror commands applied.")
	m.commandsRejected = counter("stillsky_bench_commands_rejected_total", "Mirror commands refused (wrong length or non-finite).")
	m.lockstepTimeouts = counter("stillsky_bench_lockstep_timeouts_total", "Lockstep frames produced without the awaited command.")
	m.residual = gauge("stillsky_bench_residual_wavefront_rms_meters", "True residual optical path rms over the pupil, piston removed.")
	m.strehl = gauge("stillsky_bench_strehl_ratio", "True science Strehl ratio at the science wavelength, from the PSF.")
	m.wavelength = gauge("stillsky_bench_science_wavelength_meters", "Science wavelength of the Strehl ratio.")
	m.framePeriodGau = gauge("stillsky_bench_frame_period_seconds", "Frame period of the simulated camera.")
	m.contrast = f.NewGaugeVec(prometheus.GaugeOpts{Name: "stillsky_bench_raw_contrast_ratio",
		Help: "Raw contrast of the last second's science exposure: azimuthal mean of the PSF at a separation (in λ/D at the science wavelength) over its peak."},
		[]string{"separation_lambda_over_d"})
	m.wavelength.Set(wavelength)
	m.framePeriodGau.Set(period)
	if err := buildinfo.Register(m.reg); err != nil {
		panic(err) // a fresh registry cannot hold a duplicate
	}
	return m
}
