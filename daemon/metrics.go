package daemon

import (
	"math"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/promauto"

	"stillsky/daemon/supervisor"
	"stillsky/internal/buildinfo"
)

// latencyBuckets span a fast in-memory step (µs) to a badly overloaded loop (tens of
// ms), densest around the 1 kHz frame period.
var latencyBuckets = []float64{5e-6, 10e-6, 20e-6, 35e-6, 50e-6, 75e-6, 100e-6, 150e-6, 200e-6, 300e-6, 500e-6, 750e-6, 1e-3, 2e-3, 5e-3, 10e-3, 50e-3}

// stateNames are the label values of stillsky_loop_state, indexed by loopState.
var stateNames = [...]string{stateOpen: "open", stateClosed: "closed", stateHold: "hold", stateCalibrating: "calibrating", stateTripped: "tripped"}

// Frame rejection reasons (label values of stillsky_frames_rejected_total).
const (
	rejectLength     = "length"
	rejectNonFinite  = "nonfinite"
	rejectDuplicate  = "duplicate"
	rejectOutOfOrder = "out_of_order"
	// Pixel frames: a chunk of the wrong pixel count, or chunks off the
	// detector's rows of windows.
	rejectPixelCount  = "pixel_count"
	rejectChunkLayout = "chunk_layout"
	// Pixel frames whose pixels show a defect (controller/centroid's flags).
	rejectDeadRow   = "dead_row"
	rejectSaturated = "saturated"
	rejectHotPixel  = "hot_pixel"
)

// Interlock reasons (label values of stillsky_interlock_trips_total).
const (
	tripDivergence        = "divergence"
	tripSaturation        = "saturation"
	tripStaleCamera       = "stale_camera"
	tripMirrorUnreachable = "mirror_unreachable"
)

// metrics owns every metric of the daemon, on the daemon's own registry. The
// real-time goroutine uses the pre-resolved children held here, so observing a
// frame does no label lookup and allocates nothing.
type metrics struct {
	reg *prometheus.Registry

	frames, dropped, commands                 prometheus.Counter
	rejLength, rejNonFinite, rejDup, rejOrder prometheus.Counter
	rejPixelCount, rejChunkLayout             prometheus.Counter
	rejDeadRow, rejSaturated, rejHotPixel     prometheus.Counter
	compute, rtc, endToEnd                    prometheus.Observer
	framePeriod, slopeRMS, wavefrontRMS       prometheus.Gauge
	strehl, wavelength, saturated, actuators  prometheus.Gauge
	strokeUsed, gain, leak, flux              prometheus.Gauge
	state                                     [len(stateNames)]prometheus.Gauge
	tripDiv, tripSat, tripStale, tripMirror   prometheus.Counter
	tripTTStale, tripTTSat, tripTTMirror      prometheus.Counter
	// The tip-tilt loop (tiptilt.go); 0 without one.
	ttFrames, ttCommands, ttSaturatedFrames      prometheus.Counter
	ttRejLength, ttRejNonFinite, ttRejOrder      prometheus.Counter
	ttResidualX, ttResidualY, ttResidualRMS      prometheus.Gauge
	ttCommandX, ttCommandY, ttStrokeUsed         prometheus.Gauge
	ttSaturated, ttFramePeriod, ttStroke, ttGain prometheus.Gauge
	ttFlux                                       prometheus.Gauge
	calibrationsOK, calibrationsFailed           prometheus.Counter
	refused                                      *prometheus.CounterVec
	// The loop's analysis of itself (analysis.go).
	budget                             [len(budgetTerms)]prometheus.Gauge
	budgetStrehl, r0, tau0, outerScale prometheus.Gauge
	wind, slopeNoise                   prometheus.Gauge
	// The unattended-operation supervisor (daemon/supervisor); all 0 without it.
	supervisor *supervisor.Metrics
}

func newMetrics() *metrics {
	m := &metrics{reg: prometheus.NewRegistry()}
	f := promauto.With(m.reg)
	counter := func(name, help string) prometheus.Counter {
		return f.NewCounter(prometheus.CounterOpts{Name: name, Help: help})
	}
	gauge := func(name, help string) prometheus.Gauge {
		return f.NewGauge(prometheus.GaugeOpts{Name: name, Help: help})
	}
	histogram := func(name, help string) prometheus.Observer {
		h := prometheus.NewHistogram(prometheus.HistogramOpts{Name: name, Help: help, Buckets: latencyBuckets})
		m.reg.MustRegister(h)
		return h
	}
	m.frames = counter("stillsky_frames_total", "Slope frames received from the camera.")
	m.dropped = counter("stillsky_frames_dropped_total", "Frames lost: gaps in the camera's frame numbers.")
	m.commands = counter("stillsky_commands_total", "Commands sent to the mirror.")
	rejected := prometheus.NewCounterVec(prometheus.CounterOpts{
		Name: "stillsky_frames_rejected_total",
		Help: "Frames refused by validation, by reason.",
	}, []string{"reason"})
	m.reg.MustRegister(rejected)
	m.rejLength = rejected.WithLabelValues(rejectLength)
	m.rejNonFinite = rejected.WithLabelValues(rejectNonFinite)
	m.rejDup = rejected.WithLabelValues(rejectDuplicate)
	m.rejOrder = rejected.WithLabelValues(rejectOutOfOrder)
	m.rejPixelCount = rejected.WithLabelValues(rejectPixelCount)
	m.rejChunkLayout = rejected.WithLabelValues(rejectChunkLayout)
	m.rejDeadRow = rejected.WithLabelValues(rejectDeadRow)
	m.rejSaturated = rejected.WithLabelValues(rejectSaturated)
	m.rejHotPixel = rejected.WithLabelValues(rejectHotPixel)

	m.compute = histogram("stillsky_compute_latency_seconds", "Time from frame received to command computed.")
	m.rtc = histogram("stillsky_rtc_latency_seconds", "Time from frame received to command sent: the controller's own latency.")
	m.endToEnd = histogram("stillsky_end_to_end_latency_seconds", "Time from camera readout end to the mirror's receipt of the command.")

	m.framePeriod = gauge("stillsky_frame_period_seconds", "Frame period of the camera (1 / frame rate).")
	m.slopeRMS = gauge("stillsky_residual_slope_rms_radians", "Rms of the residual slopes of the last frame.")
	m.wavefrontRMS = gauge("stillsky_residual_wavefront_rms_meters", "Reconstructed residual wavefront rms (optical path) of the last frame.")
	m.strehl = gauge("stillsky_strehl_estimate_ratio", "Maréchal estimate of the Strehl ratio at the science wavelength.")
	m.wavelength = gauge("stillsky_science_wavelength_meters", "Wavelength of the Strehl estimate.")
	m.saturated = gauge("stillsky_saturated_actuators", "Actuators at their stroke limit in the last command.")
	m.actuators = gauge("stillsky_actuators", "Valid actuators driven.")
	m.flux = gauge("stillsky_guide_star_flux_electrons", "Guide-star flux of the last frame as the camera reports it: photo-electrons summed over the valid subapertures (0 from a camera that does not report it).")
	m.strokeUsed = gauge("stillsky_stroke_used_ratio", "Largest |command| over the stroke limit in the last command.")
	budget := prometheus.NewGaugeVec(prometheus.GaugeOpts{
		Name: "stillsky_budget_residual_square_radians",
		Help: "Predicted residual phase variance at the science wavelength by error-budget term, from the loop's own turbulence estimate and gain.",
	}, []string{"term"})
	m.reg.MustRegister(budget)
	for i, t := range budgetTerms {
		m.budget[i] = budget.WithLabelValues(t)
	}
	m.budgetStrehl = gauge("stillsky_budget_strehl_ratio", "Maréchal Strehl ratio of the predicted total residual at the science wavelength.")
	m.r0 = gauge("stillsky_estimated_r0_meters", "Fried parameter at 500 nm towards the zenith, estimated from pseudo-open-loop slopes.")
	m.tau0 = gauge("stillsky_estimated_tau0_seconds", "Coherence time at 500 nm, 0.314 r0 / wind, estimated from pseudo-open-loop slopes.")
	m.outerScale = gauge("stillsky_estimated_outer_scale_meters", "Outer scale L0 best fitting the pseudo-open-loop modal variances.")
	m.wind = gauge("stillsky_estimated_wind_speed_meters_per_second", "Speed of the frozen-flow layer best fitting the pseudo-open-loop temporal correlations.")
	m.slopeNoise = gauge("stillsky_estimated_slope_noise_radians", "Rms white noise per slope estimated from the pseudo-open-loop temporal correlations.")
	for _, g := range append(m.budget[:], m.budgetStrehl, m.r0, m.tau0, m.outerScale, m.wind, m.slopeNoise) {
		g.Set(math.NaN()) // unknown until the first analysis
	}
	m.gain = gauge("stillsky_loop_gain", "Integrator gain.")
	m.leak = gauge("stillsky_loop_leak", "Integrator leak.")

	state := prometheus.NewGaugeVec(prometheus.GaugeOpts{
		Name: "stillsky_loop_state",
		Help: "1 for the current loop state, 0 for the others.",
	}, []string{"state"})
	m.reg.MustRegister(state)
	for i, name := range stateNames {
		m.state[i] = state.WithLabelValues(name)
	}

	trips := prometheus.NewCounterVec(prometheus.CounterOpts{
		Name: "stillsky_interlock_trips_total",
		Help: "Safety interlock trips, by reason.",
	}, []string{"reason"})
	m.reg.MustRegister(trips)
	m.tripDiv = trips.WithLabelValues(tripDivergence)
	m.tripSat = trips.WithLabelValues(tripSaturation)
	m.tripStale = trips.WithLabelValues(tripStaleCamera)
	m.tripMirror = trips.WithLabelValues(tripMirrorUnreachable)
	m.tripTTStale = trips.WithLabelValues(tripTipTiltStale)
	m.tripTTSat = trips.WithLabelValues(tripTipTiltSaturation)
	m.tripTTMirror = trips.WithLabelValues(tripTipTiltUnreachable)

	m.ttFrames = counter("stillsky_tip_tilt_frames_total", "Tilt frames received from the natural-star tip-tilt sensor.")
	m.ttCommands = counter("stillsky_tip_tilt_commands_total", "Commands sent to the tip-tilt mirror.")
	m.ttSaturatedFrames = counter("stillsky_tip_tilt_saturated_frames_total", "Tip-tilt frames whose command was clamped at the tip-tilt mirror's stroke.")
	ttRejected := prometheus.NewCounterVec(prometheus.CounterOpts{
		Name: "stillsky_tip_tilt_frames_rejected_total",
		Help: "Tip-tilt frames refused by validation, by reason.",
	}, []string{"reason"})
	m.reg.MustRegister(ttRejected)
	m.ttRejLength = ttRejected.WithLabelValues(rejectLength)
	m.ttRejNonFinite = ttRejected.WithLabelValues(rejectNonFinite)
	m.ttRejOrder = ttRejected.WithLabelValues(rejectOutOfOrder)
	ttResidual := prometheus.NewGaugeVec(prometheus.GaugeOpts{
		Name: "stillsky_tip_tilt_residual_radians",
		Help: "Residual tilt the tip-tilt sensor measured in its last frame, radians on the sky, by axis.",
	}, []string{"axis"})
	m.reg.MustRegister(ttResidual)
	m.ttResidualX, m.ttResidualY = ttResidual.WithLabelValues("x"), ttResidual.WithLabelValues("y")
	m.ttResidualRMS = gauge("stillsky_tip_tilt_residual_rms_radians", "Rms per axis of the measured residual tilt over about the last second of tip-tilt frames.")
	ttCommand := prometheus.NewGaugeVec(prometheus.GaugeOpts{
		Name: "stillsky_tip_tilt_command_radians",
		Help: "Last tip-tilt mirror command, radians of tilt on the sky, by axis.",
	}, []string{"axis"})
	m.reg.MustRegister(ttCommand)
	m.ttCommandX, m.ttCommandY = ttCommand.WithLabelValues("x"), ttCommand.WithLabelValues("y")
	m.ttStrokeUsed = gauge("stillsky_tip_tilt_stroke_used_ratio", "Larger |command| of the two axes over the tip-tilt mirror's stroke in the last command.")
	m.ttSaturated = gauge("stillsky_tip_tilt_saturated", "1 when the last tip-tilt command was clamped at the stroke, else 0.")
	m.ttFramePeriod = gauge("stillsky_tip_tilt_frame_period_seconds", "Frame period of the tip-tilt sensor (0 without one).")
	m.ttStroke = gauge("stillsky_tip_tilt_stroke_radians", "Stroke of the tip-tilt mirror per axis, radians on the sky (0 without one).")
	m.ttFlux = gauge("stillsky_tip_tilt_flux_electrons", "Natural-star flux of the last tip-tilt frame as the sensor reports it: photo-electrons summed over its quadrants (0 from a sensor that does not report it).")
	m.ttGain = gauge("stillsky_tip_tilt_gain", "Tip-tilt integrator gain (0 without a tip-tilt loop).")

	cals := prometheus.NewCounterVec(prometheus.CounterOpts{
		Name: "stillsky_calibrations_total",
		Help: "Calibration runs, by result.",
	}, []string{"result"})
	m.reg.MustRegister(cals)
	m.calibrationsOK = cals.WithLabelValues("ok")
	m.calibrationsFailed = cals.WithLabelValues("failed")

	m.refused = prometheus.NewCounterVec(prometheus.CounterOpts{
		Name: "stillsky_control_requests_refused_total",
		Help: "Control API calls refused, by method and gRPC status code.",
	}, []string{"method", "code"})
	m.reg.MustRegister(m.refused)
	// Pre-create the common case so the family is always exported.
	m.refused.WithLabelValues("SetGain", "InvalidArgument")

	if err := buildinfo.Register(m.reg); err != nil {
		panic(err) // a fresh registry cannot hold a duplicate
	}
	m.supervisor = supervisor.NewMetrics(m.reg)
	return m
}

// setState marks s as the current loop state.
func (m *metrics) setState(s loopState) {
	for i, g := range m.state {
		if loopState(i) == s {
			g.Set(1)
		} else {
			g.Set(0)
		}
	}
}
