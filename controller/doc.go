// Package controller is the deterministic control core of the adaptive-optics loop:
// calibration of the interaction matrix from pokes, the reconstructor (truncated-SVD
// or Tikhonov pseudo-inverse, modal gains, projection of unseen modes), and the
// per-frame leaky integrator with reference slopes, stroke limits, anti-windup,
// frame rejection and cheap residual estimates.
//
// The daemon drives it frame by frame, as an application drives a consensus core:
// it feeds slopes, reads the command and the Result, and does all I/O itself. A unit
// test can therefore run the whole loop with no sockets, clocks or goroutines.
//
// # Sign convention
//
// The bench's residual optical path difference is atmosphere − 2·(mirror surface),
// and the interaction matrix M (slopes × actuators, radians of tilt per metre of
// surface) is what a push–pull poke measures: column i = (s(+a·eᵢ) − s(−a·eᵢ))/(2a).
// It therefore already carries the factor −2 of the reflection. The actuator
// increment that nulls the residual slopes s solves M·Δ = −s, so the control matrix
// is R = −M⁺ and the integrator adds +g·R·s. Everything here follows that rule:
// a positive gain closes a negative-feedback loop.
//
// # What it must not do
//
// No I/O except through the explicit SaveReconstructor/LoadReconstructor calls; no
// goroutines (the matrix–vector kernels of controller/mvm may own workers, started
// off the hot path); no clocks (creation times are passed in by the caller); no
// logging; no gRPC or Prometheus imports. Loop.Step, Loop.StepChunk and Loop.Finish
// allocate nothing and never panic on frame data.
package controller
