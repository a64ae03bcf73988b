// Package sweep runs design studies: a grid or a list of points over scenario
// fields and loop settings (gain × r0 × guide-star magnitude × frame rate …),
// each point a lockstep closed-loop run of the demo with its summary JSON. It
// validates a whole spec before anything runs, runs the points on this machine
// (several at once) or writes a Kubernetes Indexed Job that runs one point per
// completion, and collects the results into a CSV table and Strehl-against-gain
// plots. It is what `stillsky sweep` calls.
//
// A spec is YAML:
//
//	scenario: small            # a built-in name or a scenario YAML path (relative to the spec)
//	frames_open: 200           # frames of each phase of every run (defaults 500, 2000)
//	frames_closed: 1000
//	set:                       # fixed overrides for every point (optional)
//	  atmosphere.seed: 3
//	grid:                      # every combination, the first axis varying slowest
//	  gain: [0.2, 0.4, 0.6]
//	  atmosphere.r0_m: [0.08, 0.12]
//
// or, instead of grid, points: a list of mappings of the same fields. A field is
// the loop setting gain, in [0, 2), or a scenario key named by its YAML path
// (atmosphere.r0_m, guide_star.magnitude, loop.frame_rate_hz,
// loop.delay_frames, atmosphere.layers[1].wind_speed_m_per_s, …), checked by the
// scenario's own validation. Every point of a sweep shares the scenario's
// turbulence seed unless the spec varies it, so points differ by their settings
// alone (common random numbers); put atmosphere.seed on an axis for repeats.
//
// The package does no printing of its own beyond what its callers pass a writer
// for, and runs each point through the demo's code (cmd/stillsky/internal/demo).
package sweep
