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
// All quantities are SI: metres, seconds, radians, hertz; YAML keys carry their unit
// (diameter_m, r0_m, wind_speed_m_per_s, frame_rate_hz). Telescope and site names in
// the built-ins are generic descriptive labels, not real telescopes or sites.
//
// The package depends only on sim/optics (for the pupil configuration); it must not
// depend on the bench, the controller, gRPC or clocks.
package scenario
