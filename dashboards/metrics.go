package dashboards

import "slices"

// Metric is one metric family of the metrics contract.
type Metric struct {
	Name string
	// Type is the Prometheus type: "counter", "gauge" or "histogram".
	Type string
	// Labels are the labels the exporter sets (job and instance come from the scrape).
	Labels []string
	// Exporter is "loop" for the loop daemon and "bench" for the simulated bench.
	Exporter string
}

// KnownMetrics lists every metric family the loop daemon and the simulated bench
// export. Dashboards and rules may use these names and nothing else. It is written
// from the metrics contract; a test against the daemon's live /metrics keeps the two
// in step.
var KnownMetrics = []Metric{
	{Name: "stillsky_build_info", Type: "gauge", Labels: []string{"version", "goversion"}, Exporter: "loop"},
	{Name: "stillsky_loop_state", Type: "gauge", Labels: []string{"state"}, Exporter: "loop"},
	{Name: "stillsky_frames_total", Type: "counter", Exporter: "loop"},
	{Name: "stillsky_frames_dropped_total", Type: "counter", Exporter: "loop"},
	{Name: "stillsky_frames_rejected_total", Type: "counter", Labels: []string{"reason"}, Exporter: "loop"},
	{Name: "stillsky_commands_total", Type: "counter", Exporter: "loop"},
	{Name: "stillsky_compute_latency_seconds", Type: "histogram", Exporter: "loop"},
	{Name: "stillsky_rtc_latency_seconds", Type: "histogram", Exporter: "loop"},
	{Name: "stillsky_end_to_end_latency_seconds", Type: "histogram", Exporter: "loop"},
	{Name: "stillsky_frame_period_seconds", Type: "gauge", Exporter: "loop"},
	{Name: "stillsky_residual_slope_rms_radians", Type: "gauge", Exporter: "loop"},
	{Name: "stillsky_residual_wavefront_rms_meters", Type: "gauge", Exporter: "loop"},
	{Name: "stillsky_strehl_estimate_ratio", Type: "gauge", Exporter: "loop"},
	{Name: "stillsky_science_wavelength_meters", Type: "gauge", Exporter: "loop"},
	{Name: "stillsky_saturated_actuators", Type: "gauge", Exporter: "loop"},
	{Name: "stillsky_actuators", Type: "gauge", Exporter: "loop"},
	{Name: "stillsky_stroke_used_ratio", Type: "gauge", Exporter: "loop"},
	{Name: "stillsky_guide_star_flux_electrons", Type: "gauge", Exporter: "loop"},
	{Name: "stillsky_loop_gain", Type: "gauge", Exporter: "loop"},
	{Name: "stillsky_loop_leak", Type: "gauge", Exporter: "loop"},
	{Name: "stillsky_interlock_trips_total", Type: "counter", Labels: []string{"reason"}, Exporter: "loop"},
	{Name: "stillsky_control_requests_refused_total", Type: "counter", Labels: []string{"method", "code"}, Exporter: "loop"},
	{Name: "stillsky_calibrations_total", Type: "counter", Labels: []string{"result"}, Exporter: "loop"},
	{Name: "stillsky_budget_residual_square_radians", Type: "gauge", Labels: []string{"term"}, Exporter: "loop"},
	{Name: "stillsky_budget_strehl_ratio", Type: "gauge", Exporter: "loop"},
	{Name: "stillsky_estimated_r0_meters", Type: "gauge", Exporter: "loop"},
	{Name: "stillsky_estimated_tau0_seconds", Type: "gauge", Exporter: "loop"},
	{Name: "stillsky_estimated_outer_scale_meters", Type: "gauge", Exporter: "loop"},
	{Name: "stillsky_estimated_wind_speed_meters_per_second", Type: "gauge", Exporter: "loop"},
	{Name: "stillsky_estimated_slope_noise_radians", Type: "gauge", Exporter: "loop"},
	{Name: "stillsky_tip_tilt_frames_total", Type: "counter", Exporter: "loop"},
	{Name: "stillsky_tip_tilt_frames_rejected_total", Type: "counter", Labels: []string{"reason"}, Exporter: "loop"},
	{Name: "stillsky_tip_tilt_commands_total", Type: "counter", Exporter: "loop"},
	{Name: "stillsky_tip_tilt_saturated_frames_total", Type: "counter", Exporter: "loop"},
	{Name: "stillsky_tip_tilt_residual_radians", Type: "gauge", Labels: []string{"axis"}, Exporter: "loop"},
	{Name: "stillsky_tip_tilt_residual_rms_radians", Type: "gauge", Exporter: "loop"},
	{Name: "stillsky_tip_tilt_command_radians", Type: "gauge", Labels: []string{"axis"}, Exporter: "loop"},
	{Name: "stillsky_tip_tilt_stroke_used_ratio", Type: "gauge", Exporter: "loop"},
	{Name: "stillsky_tip_tilt_saturated", Type: "gauge", Exporter: "loop"},
	{Name: "stillsky_tip_tilt_frame_period_seconds", Type: "gauge", Exporter: "loop"},
	{Name: "stillsky_tip_tilt_stroke_radians", Type: "gauge", Exporter: "loop"},
	{Name: "stillsky_tip_tilt_gain", Type: "gauge", Exporter: "loop"},
	{Name: "stillsky_tip_tilt_flux_electrons", Type: "gauge", Exporter: "loop"},
	{Name: "stillsky_supervisor_state", Type: "gauge", Labels: []string{"state"}, Exporter: "loop"},
	{Name: "stillsky_supervisor_transitions_total", Type: "counter", Labels: []string{"from", "to"}, Exporter: "loop"},

	{Name: "stillsky_build_info", Type: "gauge", Labels: []string{"version", "goversion"}, Exporter: "bench"},
	{Name: "stillsky_bench_frames_total", Type: "counter", Exporter: "bench"},
	{Name: "stillsky_bench_commands_total", Type: "counter", Exporter: "bench"},
	{Name: "stillsky_bench_tip_tilt_commands_total", Type: "counter", Exporter: "bench"},
	{Name: "stillsky_bench_residual_wavefront_rms_meters", Type: "gauge", Exporter: "bench"},
	{Name: "stillsky_bench_strehl_ratio", Type: "gauge", Exporter: "bench"},
	{Name: "stillsky_bench_raw_contrast_ratio", Type: "gauge", Labels: []string{"separation_lambda_over_d"}, Exporter: "bench"},
	{Name: "stillsky_bench_science_wavelength_meters", Type: "gauge", Exporter: "bench"},
	{Name: "stillsky_bench_frame_period_seconds", Type: "gauge", Exporter: "bench"},
}

// LatencyBuckets are the upper bounds, in seconds, of the latency histograms'
// buckets (the metrics contract).
var LatencyBuckets = []float64{5e-6, 10e-6, 20e-6, 35e-6, 50e-6, 75e-6, 100e-6, 150e-6, 200e-6, 300e-6, 500e-6, 750e-6, 1e-3, 2e-3, 5e-3, 10e-3, 50e-3}

// SeriesNames returns the sorted names a query may select: a counter or gauge by
// its own name, a histogram by its _bucket, _sum and _count series.
func SeriesNames() []string {
	var names []string
	for _, m := range KnownMetrics {
		if m.Type == "histogram" {
			names = append(names, m.Name+"_bucket", m.Name+"_sum", m.Name+"_count")
			continue
		}
		names = append(names, m.Name)
	}
	slices.Sort(names)
	return slices.Compact(names)
}
