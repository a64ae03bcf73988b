//lint:file-ignore SA1019 The dashboards are Grafana's v1 dashboard JSON model, the format its file provisioning (deploy/grafana) loads; the SDK marks the v1 builders deprecated in favour of the v2 schema, a different resource format.

package dashboards

import (
	"bytes"
	"encoding/json"
	"fmt"
	"strings"

	"github.com/grafana/grafana-foundation-sdk/go/cog"
	"github.com/grafana/grafana-foundation-sdk/go/common"
	"github.com/grafana/grafana-foundation-sdk/go/dashboard"
	"github.com/grafana/grafana-foundation-sdk/go/heatmap"
	"github.com/grafana/grafana-foundation-sdk/go/prometheus"
	"github.com/grafana/grafana-foundation-sdk/go/stat"
	"github.com/grafana/grafana-foundation-sdk/go/statetimeline"
	"github.com/grafana/grafana-foundation-sdk/go/timeseries"
	"github.com/grafana/grafana-foundation-sdk/go/units"
)

// File is one dashboard and the file name it is committed under in grafana/.
type File struct {
	Name      string
	Dashboard dashboard.Dashboard
}

// JSON returns the dashboard as Grafana imports it: indented, newline-terminated.
func (f File) JSON() ([]byte, error) {
	var buf bytes.Buffer
	enc := json.NewEncoder(&buf)
	enc.SetIndent("", "  ")
	enc.SetEscapeHTML(false)
	if err := enc.Encode(f.Dashboard); err != nil {
		return nil, fmt.Errorf("dashboards: encode %s: %w", f.Name, err)
	}
	return buf.Bytes(), nil
}

// Build returns every dashboard.
func Build() ([]File, error) {
	builders := []struct {
		name string
		b    *dashboard.DashboardBuilder
	}{
		{"loop-overview.json", overview()},
		{"latency.json", latency()},
		{"wavefront.json", wavefront()},
		{"mirror.json", mirror()},
	}
	files := make([]File, 0, len(builders))
	for _, d := range builders {
		built, err := d.b.Build()
		if err != nil {
			return nil, fmt.Errorf("dashboards: build %s: %w", d.name, err)
		}
		nameQueries(built)
		files = append(files, File{Name: d.name, Dashboard: built})
	}
	return files, nil
}

// nameQueries gives each panel's queries the reference ids A, B, C… that Grafana
// uses to tell a panel's queries apart.
func nameQueries(d dashboard.Dashboard) {
	for _, p := range d.Panels {
		if p.Panel == nil {
			continue
		}
		for i, t := range p.Panel.Targets {
			if pq, ok := t.(prometheus.Dataquery); ok {
				pq.RefId = cog.ToPtr(string(rune('A' + i)))
				p.Panel.Targets[i] = pq
			}
		}
	}
}

// datasource is the Prometheus data source every panel and query uses: the one
// chosen in the dashboard's datasource variable.
func datasource() common.DataSourceRef {
	return common.DataSourceRef{Type: cog.ToPtr("prometheus"), Uid: cog.ToPtr("${datasource}")}
}

// sel is the series selector every query uses, so that the job and instance
// variables filter every panel.
const sel = `job=~"$job",instance=~"$instance"`

// q returns metric{job=~"$job",instance=~"$instance"}.
func q(metric string) string { return metric + "{" + sel + "}" }

// rate returns the per-second rate of a counter over Grafana's rate interval.
func rate(counter string) string { return "rate(" + q(counter) + "[$__rate_interval])" }

func target(expr, legend string) *prometheus.DataqueryBuilder {
	return prometheus.NewDataqueryBuilder().
		Datasource(datasource()).
		Expr(expr).
		LegendFormat(legend).
		EditorMode(prometheus.QueryEditorModeCode)
}

// base starts a dashboard with the variables every query uses: the data source,
// the job and the instance (all jobs and instances by default, so the bench's
// panels show beside the loop's).
func base(uid, title, description string) *dashboard.DashboardBuilder {
	// A multi-value variable holds lists, so its current value is a list too.
	all := dashboard.VariableOption{Text: dashboard.StringOrArrayOfString{ArrayOfString: []string{"All"}}, Value: dashboard.StringOrArrayOfString{ArrayOfString: []string{"$__all"}}}
	labelValues := func(name, label, query string) *dashboard.QueryVariableBuilder {
		return dashboard.NewQueryVariableBuilder(name).
			Label(label).
			Datasource(datasource()).
			Query(dashboard.StringOrMap{String: cog.ToPtr(query)}).
			Definition(query).
			Refresh(dashboard.VariableRefreshOnTimeRangeChanged).
			Sort(dashboard.VariableSortAlphabeticalAsc).
			Multi(true).
			IncludeAll(true).
			AllValue(".*").
			Current(all)
	}
	return dashboard.NewDashboardBuilder(title).
		Uid(uid).
		Description(description).
		Tags([]string{"stillsky"}).
		Editable().
		Refresh("5s").
		Time("now-15m", "now").
		Timezone(common.TimeZoneBrowser).
		Tooltip(dashboard.DashboardCursorSyncCrosshair).
		WithVariable(dashboard.NewDatasourceVariableBuilder("datasource").Label("Data source").Type("prometheus")).
		WithVariable(labelValues("job", "Job", `label_values(stillsky_build_info, job)`)).
		WithVariable(labelValues("instance", "Instance", `label_values(stillsky_build_info{job=~"$job"}, instance)`))
}

// panelID numbers panels within one dashboard build; Grafana needs them unique
// per dashboard and stable for links.
type panelID struct{ n uint32 }

func (p *panelID) next() uint32 { p.n++; return p.n }

func series(id *panelID, title, description, unit string, w, h uint32) *timeseries.PanelBuilder {
	return timeseries.NewPanelBuilder().
		Id(id.next()).
		Title(title).
		Description(description).
		Datasource(datasource()).
		Unit(unit).
		Span(w).
		Height(h).
		Legend(common.NewVizLegendOptionsBuilder().
			ShowLegend(true).
			DisplayMode(common.LegendDisplayModeList).
			Placement(common.LegendPlacementBottom))
}

func single(id *panelID, title, description, unit string, w, h uint32) *stat.PanelBuilder {
	return stat.NewPanelBuilder().
		Id(id.next()).
		Title(title).
		Description(description).
		Datasource(datasource()).
		Unit(unit).
		Span(w).
		Height(h).
		ColorMode(common.BigValueColorModeValue).
		GraphMode(common.BigValueGraphModeNone).
		ReduceOptions(common.NewReduceDataOptionsBuilder().Calcs([]string{"lastNotNull"}))
}

// steps are colour thresholds: green from -inf, then each (value, colour).
func steps(pairs ...any) *dashboard.ThresholdsConfigBuilder {
	out := []dashboard.Threshold{{Value: nil, Color: "green"}}
	for i := 0; i+1 < len(pairs); i += 2 {
		v := pairs[i].(float64)
		out = append(out, dashboard.Threshold{Value: &v, Color: pairs[i+1].(string)})
	}
	return dashboard.NewThresholdsConfigBuilder().Mode(dashboard.ThresholdsModeAbsolute).Steps(out)
}

func overview() *dashboard.DashboardBuilder {
	id := &panelID{}
	return base("stillsky-loop-overview", "stillsky: loop overview",
		"Loop state, frame and command rates, dropped and rejected frames, integrator settings and interlock trips of the loop daemon.").
		WithPanel(single(id, "Current loop state", "The state whose stillsky_loop_state series is 1.", units.NoUnit, 6, 5).
			TextMode(common.BigValueTextModeName).
			WithTarget(target(q("stillsky_loop_state")+" == 1", "{{state}}").Instant())).
		WithPanel(single(id, "Frames per second", "Rate of slope frames received from the camera.", units.Hertz, 6, 5).
			WithTarget(target(rate("stillsky_frames_total"), "{{instance}}"))).
		WithPanel(single(id, "Integrator gain", "Gain of the leaky integrator.", units.NoUnit, 6, 5).
			WithTarget(target(q("stillsky_loop_gain"), "{{instance}}"))).
		WithPanel(single(id, "Integrator leak", "Leak of the leaky integrator.", units.NoUnit, 6, 5).
			WithTarget(target(q("stillsky_loop_leak"), "{{instance}}"))).
		WithPanel(statetimeline.NewPanelBuilder().
			Id(id.next()).
			Title("Loop state over time").
			Description("Which of open, closed, hold, calibrating and tripped the loop was in.").
			Datasource(datasource()).
			Span(24).
			Height(5).
			MergeValues(true).
			ShowValue(common.VisibilityModeNever).
			WithTarget(target(q("stillsky_loop_state")+" == 1", "{{instance}} {{state}}"))).
		WithPanel(series(id, "Frames received and commands sent per second", "Camera frames in and mirror commands out; in closed loop the two rates match.", units.Hertz, 12, 8).
			WithTarget(target(rate("stillsky_frames_total"), "frames {{instance}}")).
			WithTarget(target(rate("stillsky_commands_total"), "commands {{instance}}"))).
		WithPanel(series(id, "Dropped frames per second", "Gaps in the camera's frame numbers and frames skipped because the loop fell behind.", units.Hertz, 12, 8).
			WithTarget(target(rate("stillsky_frames_dropped_total"), "{{instance}}"))).
		WithPanel(series(id, "Rejected frames per second by reason", "Frames refused by validation: wrong length, non-finite values, duplicates, out of order.", units.Hertz, 12, 8).
			WithTarget(target("sum by (instance, reason) ("+rate("stillsky_frames_rejected_total")+")", "{{reason}} {{instance}}"))).
		WithPanel(series(id, "Integrator gain and leak", "Settings of the leaky integrator as the operator changes them.", units.NoUnit, 12, 8).
			WithTarget(target(q("stillsky_loop_gain"), "gain {{instance}}")).
			WithTarget(target(q("stillsky_loop_leak"), "leak {{instance}}"))).
		WithPanel(series(id, "Interlock trips by reason", "Safety interlock trips in each interval: divergence, saturation, stale camera, mirror unreachable.", units.Short, 12, 8).
			DrawStyle(common.GraphDrawStyleBars).
			WithTarget(target("sum by (instance, reason) (increase("+q("stillsky_interlock_trips_total")+"[$__rate_interval]))", "{{reason}} {{instance}}"))).
		WithPanel(series(id, "Calibrations by result", "Calibration runs that succeeded or failed, cumulative.", units.Short, 12, 8).
			WithTarget(target("sum by (instance, result) ("+q("stillsky_calibrations_total")+")", "{{result}} {{instance}}"))).
		WithPanel(statetimeline.NewPanelBuilder().
			Id(id.next()).
			Title("Unattended supervisor state over time").
			Description("With stillsky loop --autonomous: which of starting, calibrating, acquiring, closed, holding, clouded, tripped and manual the supervisor was in (1 for the state it is in, 0 for the others; all 0 when the daemon runs without the supervisor; daemon/supervisor documents the states).").
			Datasource(datasource()).
			Span(12).
			Height(8).
			MergeValues(true).
			ShowValue(common.VisibilityModeNever).
			WithTarget(target(q("stillsky_supervisor_state"), "{{instance}} {{state}}"))).
		WithPanel(series(id, "Unattended supervisor transitions", "Transitions of the supervisor in each interval, by state left and state entered: a flux loss is closed→holding, a cloud that lasts holding→clouded.", units.Short, 12, 8).
			DrawStyle(common.GraphDrawStyleBars).
			WithTarget(target("sum by (instance, from, to) (increase("+q("stillsky_supervisor_transitions_total")+"[$__rate_interval]))", "{{from}}→{{to}} {{instance}}"))).
		WithPanel(series(id, "Guide-star flux per frame", "Photo-electrons per frame summed over the valid subapertures, as the camera reports them with every frame (flux_electrons): what the unattended supervisor closes, holds and opens on; a cloud is a dip, a lost star a fall to the background (0 from a camera that does not report it).", units.Short, 24, 8).
			WithTarget(target(q("stillsky_guide_star_flux_electrons"), "{{instance}}"))).
		WithPanel(single(id, "Running versions", "Version of each scraped stillsky process.", units.NoUnit, 24, 4).
			TextMode(common.BigValueTextModeName).
			WithTarget(target(q("stillsky_build_info"), "{{job}} {{instance}} {{version}}").Instant()))
}

// latencyPanels draws one latency histogram: its buckets as a heatmap and three
// quantiles against the camera's frame period, the budget the loop must stay in.
func latencyPanels(b *dashboard.DashboardBuilder, id *panelID, name, metric, meaning string) *dashboard.DashboardBuilder {
	bucket := rate(metric + "_bucket")
	quantile := func(phi, legend string) *prometheus.DataqueryBuilder {
		return target("histogram_quantile("+phi+", sum by (instance, le) ("+bucket+"))", legend+" {{instance}}")
	}
	return b.
		WithPanel(heatmap.NewPanelBuilder().
			Id(id.next()).
			Title(name + " latency distribution").
			Description(meaning + ": observations per second in each histogram bucket.").
			Datasource(datasource()).
			Span(12).
			Height(9).
			Calculate(false).
			YAxis(heatmap.NewYAxisConfigBuilder().Unit(units.Seconds)).
			CellValues(heatmap.NewCellValuesBuilder().Unit(units.Short)).
			Color(heatmap.NewHeatmapColorOptionsBuilder().
				Mode(heatmap.HeatmapColorModeScheme).
				Scheme("Oranges").
				Scale(heatmap.HeatmapColorScaleExponential).
				Exponent(0.5).
				Steps(64)).
			RowsFrame(heatmap.NewRowsHeatmapOptionsBuilder().Layout(common.HeatmapCellLayoutLe)).
			WithTarget(target("sum by (le) ("+bucket+")", "{{le}}").Format(prometheus.PromQueryFormatHeatmap))).
		WithPanel(series(id, name+" latency quantiles and frame period", meaning+": median, 99th and 99.9th percentile, drawn against the frame period.", units.Seconds, 12, 9).
			ScaleDistribution(common.NewScaleDistributionConfigBuilder().Type(common.ScaleDistributionLog).Log(10)).
			WithTarget(quantile("0.5", "p50")).
			WithTarget(quantile("0.99", "p99")).
			WithTarget(quantile("0.999", "p99.9")).
			WithTarget(target(q("stillsky_frame_period_seconds"), "frame period {{instance}}")))
}

func latency() *dashboard.DashboardBuilder {
	id := &panelID{}
	b := base("stillsky-latency", "stillsky: latency",
		"Latency histograms of the loop daemon, against the camera's frame period.")
	b = latencyPanels(b, id, "Compute", "stillsky_compute_latency_seconds", "Frame received to command computed")
	b = latencyPanels(b, id, "RTC", "stillsky_rtc_latency_seconds", "Frame received to command sent")
	return latencyPanels(b, id, "End-to-end", "stillsky_end_to_end_latency_seconds", "Camera readout end to mirror received the command")
}

func wavefront() *dashboard.DashboardBuilder {
	id := &panelID{}
	nm := "suffix: nm"
	return base("stillsky-wavefront", "stillsky: wavefront",
		"Residual slopes and wavefront, and the Strehl ratio: the loop's estimate and, where the bench is scraped, the bench's true value.").
		WithPanel(single(id, "Strehl estimate", "Maréchal estimate from the reconstructed residual, at the science wavelength.", units.PercentUnit, 8, 5).
			Min(0).Max(1).
			Thresholds(steps(0.0, "red", 0.2, "orange", 0.5, "green")).
			WithTarget(target(q("stillsky_strehl_estimate_ratio"), "{{instance}}"))).
		WithPanel(single(id, "Residual wavefront rms", "Reconstructed residual optical path difference, rms.", nm, 8, 5).
			Decimals(1).
			WithTarget(target(q("stillsky_residual_wavefront_rms_meters")+" * 1e9", "{{instance}}"))).
		WithPanel(single(id, "Science wavelength", "Wavelength of the Strehl estimate and of the bench's true Strehl.", nm, 8, 5).
			Decimals(0).
			WithTarget(target(q("stillsky_science_wavelength_meters")+" * 1e9", "loop {{instance}}")).
			WithTarget(target(q("stillsky_bench_science_wavelength_meters")+" * 1e9", "bench {{instance}}"))).
		WithPanel(series(id, "Strehl ratio: loop estimate and bench truth", "The loop's Maréchal estimate beside the true Strehl the bench computes from its PSF (bench series appear only where the bench is scraped).", units.PercentUnit, 24, 8).
			Min(0).Max(1).
			WithTarget(target(q("stillsky_strehl_estimate_ratio"), "estimate {{instance}}")).
			WithTarget(target(q("stillsky_bench_strehl_ratio"), "bench true {{instance}}"))).
		WithPanel(series(id, "Residual wavefront rms: loop estimate and bench truth", "Loop's reconstructed residual and the bench's true residual over the pupil (piston removed), in nanometres of optical path.", nm, 12, 8).
			WithTarget(target(q("stillsky_residual_wavefront_rms_meters")+" * 1e9", "loop estimate {{instance}}")).
			WithTarget(target(q("stillsky_bench_residual_wavefront_rms_meters")+" * 1e9", "bench true {{instance}}"))).
		WithPanel(series(id, "Residual slope rms", "Rms of the residual slopes the loop receives, in radians of tilt.", units.Radians, 12, 8).
			WithTarget(target(q("stillsky_residual_slope_rms_radians"), "{{instance}}"))).
		WithPanel(series(id, "Bench frames and commands per second", "Frames the bench produced and mirror commands it applied.", units.Hertz, 12, 8).
			WithTarget(target(rate("stillsky_bench_frames_total"), "frames {{instance}}")).
			WithTarget(target(rate("stillsky_bench_commands_total"), "commands {{instance}}"))).
		WithPanel(series(id, "Frame period: loop and bench", "Frame period the loop learned from the camera and the one the bench runs at.", units.Seconds, 12, 8).
			WithTarget(target(q("stillsky_frame_period_seconds"), "loop {{instance}}")).
			WithTarget(target(q("stillsky_bench_frame_period_seconds"), "bench {{instance}}"))).
		WithPanel(series(id, "Raw contrast by separation", "Azimuthal mean of the bench's one-second science PSF at 2, 5, 10 and 20 λ/D over its peak (bench series only where the bench is scraped); the dark hole of a corrected PSF reaches to the control radius, (actuators across − 1)/2 · λ/D, beyond which the contrast rises to the uncorrected halo.", units.Short, 24, 8).
			ScaleDistribution(common.NewScaleDistributionConfigBuilder().Type(common.ScaleDistributionLog).Log(10)).
			WithTarget(target(q("stillsky_bench_raw_contrast_ratio"), "{{separation_lambda_over_d}} λ/D {{instance}}"))).
		WithPanel(series(id, "Error budget by term", "Residual phase variance at the science wavelength that the loop predicts for each term (fitting, aliasing, servo lag, noise) and in total, from its own turbulence estimate and gain, in rad².", units.Short, 12, 8).
			WithTarget(target(q("stillsky_budget_residual_square_radians"), "{{term}} {{instance}}"))).
		WithPanel(series(id, "Strehl ratio: budget, estimate and bench truth", "Maréchal Strehl of the predicted total beside the loop's slope-based estimate and the bench's true Strehl (where the bench is scraped).", units.PercentUnit, 12, 8).
			Min(0).Max(1).
			WithTarget(target(q("stillsky_budget_strehl_ratio"), "budget {{instance}}")).
			WithTarget(target(q("stillsky_strehl_estimate_ratio"), "estimate {{instance}}")).
			WithTarget(target(q("stillsky_bench_strehl_ratio"), "bench true {{instance}}"))).
		WithPanel(series(id, "Estimated r0 and outer scale", "Fried parameter (500 nm, zenith) and outer scale fitted to the pseudo-open-loop modal variances, in metres.", "m", 8, 8).
			WithTarget(target(q("stillsky_estimated_r0_meters"), "r0 {{instance}}")).
			WithTarget(target(q("stillsky_estimated_outer_scale_meters"), "L0 {{instance}}"))).
		WithPanel(series(id, "Estimated coherence time", "τ0 at 500 nm, 0.314 r0 over the wind speed fitted to the pseudo-open-loop temporal correlations.", units.Seconds, 8, 8).
			WithTarget(target(q("stillsky_estimated_tau0_seconds"), "τ0 {{instance}}"))).
		WithPanel(series(id, "Estimated wind speed and slope noise", "Speed of the single frozen-flow layer that fits best (m/s) and the rms white noise per slope (rad) found in the same data.", units.Short, 8, 8).
			WithTarget(target(q("stillsky_estimated_wind_speed_meters_per_second"), "wind m/s {{instance}}")).
			WithTarget(target(q("stillsky_estimated_slope_noise_radians"), "slope noise rad {{instance}}")))
}

func mirror() *dashboard.DashboardBuilder {
	id := &panelID{}
	saturated := q("stillsky_saturated_actuators") + " / " + q("stillsky_actuators")
	return base("stillsky-mirror", "stillsky: mirror",
		"Saturation and stroke of the deformable mirror commands the loop sends, and the tip-tilt loop: its residual, the tip-tilt mirror's command and stroke.").
		WithPanel(single(id, "Saturated actuators", "Actuators at their stroke limit in the last command.", units.Short, 6, 5).
			Thresholds(steps(1.0, "orange")).
			WithTarget(target(q("stillsky_saturated_actuators"), "{{instance}}"))).
		WithPanel(single(id, "Actuators driven", "Valid actuators the loop commands.", units.Short, 6, 5).
			WithTarget(target(q("stillsky_actuators"), "{{instance}}"))).
		WithPanel(single(id, "Fraction of actuators saturated", "Saturated actuators divided by the actuators driven.", units.PercentUnit, 6, 5).
			Thresholds(steps(0.02, "orange", 0.1, "red")).
			WithTarget(target(saturated, "{{instance}}"))).
		WithPanel(single(id, "Stroke used", "Largest command magnitude over the stroke limit, last command.", units.PercentUnit, 6, 5).
			Min(0).Max(1).
			Thresholds(steps(0.8, "orange", 0.95, "red")).
			WithTarget(target(q("stillsky_stroke_used_ratio"), "{{instance}}"))).
		WithPanel(series(id, "Saturated actuators over time", "Actuators at their stroke limit in each command, over time.", units.Short, 12, 8).
			WithTarget(target(q("stillsky_saturated_actuators"), "saturated {{instance}}"))).
		WithPanel(series(id, "Fraction saturated and stroke used", "Both as fractions: of actuators saturated, and of the stroke limit used by the largest command.", units.PercentUnit, 12, 8).
			Min(0).Max(1).
			WithTarget(target(saturated, "saturated fraction {{instance}}")).
			WithTarget(target(q("stillsky_stroke_used_ratio"), "stroke used {{instance}}"))).
		WithPanel(series(id, "Mirror commands per second", "Commands the loop sent and commands the bench applied.", units.Hertz, 24, 8).
			WithTarget(target(rate("stillsky_commands_total"), "sent {{instance}}")).
			WithTarget(target(rate("stillsky_bench_commands_total"), "applied by bench {{instance}}"))).
		WithPanel(series(id, "Tip-tilt residual", "Residual tilt the natural-star tip-tilt sensor measures, per axis, and its rms over about a second, radians on the sky (all 0 without a tip-tilt loop).", "rad", 12, 8).
			WithTarget(target(q("stillsky_tip_tilt_residual_rms_radians"), "rms {{instance}}")).
			WithTarget(target(q("stillsky_tip_tilt_residual_radians"), "{{axis}} {{instance}}"))).
		WithPanel(series(id, "Tip-tilt mirror command", "Tip-tilt mirror command per axis, radians on the sky, against its stroke.", "rad", 12, 8).
			WithTarget(target(q("stillsky_tip_tilt_command_radians"), "{{axis}} {{instance}}")).
			WithTarget(target(q("stillsky_tip_tilt_stroke_radians"), "stroke {{instance}}"))).
		WithPanel(single(id, "Tip-tilt stroke used", "Larger tip-tilt command of the two axes over the tip-tilt mirror's stroke, last command.", units.PercentUnit, 6, 5).
			Min(0).Max(1).
			Thresholds(steps(0.8, "orange", 0.95, "red")).
			WithTarget(target(q("stillsky_tip_tilt_stroke_used_ratio"), "{{instance}}"))).
		WithPanel(single(id, "Tip-tilt saturated frames per second", "Tip-tilt frames whose command was clamped at the stroke, per second.", units.Hertz, 6, 5).
			Thresholds(steps(0.1, "orange")).
			WithTarget(target(rate("stillsky_tip_tilt_saturated_frames_total"), "{{instance}}"))).
		WithPanel(series(id, "Tip-tilt star flux", "Photo-electrons of the natural star per tip-tilt frame, as the sensor reports them: clouds dim it.", units.Short, 12, 5).
			WithTarget(target(q("stillsky_tip_tilt_flux_electrons"), "{{instance}}"))).
		WithPanel(series(id, "Tip-tilt frames and commands per second", "Tilt frames the loop received, commands it sent to the tip-tilt mirror and commands the bench applied.", units.Hertz, 12, 5).
			WithTarget(target(rate("stillsky_tip_tilt_frames_total"), "frames {{instance}}")).
			WithTarget(target(rate("stillsky_tip_tilt_commands_total"), "sent {{instance}}")).
			WithTarget(target(rate("stillsky_bench_tip_tilt_commands_total"), "applied by bench {{instance}}")))
}

// Query is one panel query, named by the dashboard and panel it belongs to.
type Query struct {
	Dashboard, Panel, Expr string
}

// Queries returns every panel query of the dashboards in files.
func Queries(files []File) []Query {
	var out []Query
	for _, f := range files {
		for _, p := range f.Dashboard.Panels {
			if p.Panel == nil {
				continue
			}
			for _, t := range p.Panel.Targets {
				pq, ok := t.(prometheus.Dataquery)
				if !ok {
					continue
				}
				out = append(out, Query{Dashboard: f.Name, Panel: deref(p.Panel.Title), Expr: pq.Expr})
			}
		}
	}
	return out
}

func deref(s *string) string {
	if s == nil {
		return ""
	}
	return *s
}

// Interpolate replaces the Grafana variables the dashboards use by what Grafana
// would send with every job and instance selected, so that the expression can be
// parsed or sent to Prometheus directly. rateInterval is a PromQL duration such
// as "1m".
func Interpolate(expr, rateInterval string) string {
	return strings.NewReplacer(
		"$__rate_interval", rateInterval,
		"$job", ".*",
		"$instance", ".*",
	).Replace(expr)
}
