// Package scenario describes a simulated adaptive-optics system — telescope pupil,
// turbulence layers, guide star, Shack–Hartmann sensor, deformable mirror, loop rate
// and science wavelength — as a YAML file, and validates it strictly.
//
// Parse refuses unknown keys, missing required keys, values of the wrong type and
// values out of range; every error names the field path (for example
// "atmosphere.layers[1].fraction") and the allowed range, and nothing is half-loaded.
// Built-in scenarios are embedded from builtin/*.yaml and loaded by name.
//
// Every physical quantity is required. Optional keys and their defaults:
// description (""), telescope.name and telescope.site (""), telescope.spiders (0),
// telescope.spider_width_m (0), atmosphere.zenith_deg (0), atmosphere.seed (1),
// wfs.valid_threshold (0.5), wfs.pixels_per_subaperture (2 × pupil samples per
// subaperture), wfs.pixel_scale_rad (λ_gs/(2d), Nyquist), wfs.read_noise_e (0),
// wfs.background_e_per_pixel (0), wfs.centroid_threshold (0), wfs.noise (true),
// dm.margin_pitches (0.75). Scenario.YAML writes every key, defaults included.
//
// An eye scenario (retinal imaging) has an "eye" section in place of
// "atmosphere": the eye's aberrations drawn from the population statistics of
// normal eyes (eye.study: thibos2002, Thibos, Hong, Bradley & Cheng 2002,
// JOSA A 19, 2329, 6 mm pupil, so telescope.diameter_m must be 0.006),
// fluctuating with accommodation (eye.accommodation_rms_d, default 0.1 D;
// eye.accommodation_band_hz, default [1, 2], below the loop's Nyquist
// frequency), and the beacon's safety fields eye.beacon_power_w,
// eye.beacon_exposure_s and eye.exposure_limit_j, all required: Parse (and the
// bench) refuse a beacon whose power × exposure time exceeds the limit, with
// ErrExposure and the values named. That check is indicative only: exposure
// limits follow ANSI Z136.1 and ISO 15004-2, and local medical-device and
// ethics rules and licensed practice govern any real use. eye.seed defaults to 1.
//
// An optional "tip_tilt" section adds a natural-star tip-tilt sensor (a quad
// cell) and a tip-tilt mirror, and sets the daemon's tip-tilt loop:
// tip_tilt.magnitude, frame_rate_hz (loop.frame_rate_hz over a whole number),
// gain, offload_gain and stroke_rad are required; wavelength_m (8e-7) and
// read_noise_e (0) are optional.
//
// An optional "clouds" list schedules cloud passages in front of the guide star,
// each {start_s, duration_s, depth, ramp_s} in seconds of the bench's frame time
// (ramp_s optional, default 0): the transmission falls linearly to 1 − depth over
// ramp_s and rises back at the end; passages come in time order without overlap,
// and an eye scenario has none (Cloud, Clouds.Transmission). An optional
// "supervisor" section sets the unattended-operation supervisor's thresholds for
// `stillsky demo --autonomous` (min_flux_e, loss_fraction, return_fraction,
// loss_dwell_s, return_dwell_s, hold_timeout_s, long_pause_s, measure_window_s,
// retry_delay_s; each optional, with the supervisor's defaults; see Supervisor).
//
// An optional "wfs.pixels" subsection puts the camera in pixel mode: it streams
// raw 16-bit detector frames (sim/detector) and the loop daemon centroids them.
// pixels_per_subaperture, pixel_scale_rad, read_noise_e, full_well_e and
// centroid ("cog" or "wcog") are required; background_e_per_pixel (0), bias_adu
// (100), dark_e_per_pixel (0), flat_rms (0), flat_seed (1), gain_e_per_adu (1),
// threshold (0) and weight_sigma_px (wcog only; default the spot's rms width)
// are optional. Without it the camera streams slopes.
//
// All quantities are SI: metres, seconds, radians, hertz; YAML keys carry their unit
// (diameter_m, r0_m, wind_speed_m_per_s, frame_rate_hz). Telescope and site names in
// the built-ins are generic descriptive labels, not real telescopes or sites.
//
// The package depends only on sim/optics (for the pupil configuration); it must not
// depend on the bench, the controller, gRPC or clocks.
package scenario
