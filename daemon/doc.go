// Package daemon is the loop process around the control core: it connects to the
// camera and mirror over gRPC, learns their geometry through Describe, runs the
// real-time goroutine (receive → controller.Loop.Step → send), serves the Control
// API and exports Prometheus metrics from its own registry. It holds the loop state
// machine, calibration driving, persistence of the committed reconstructor and the
// safety interlocks. It puts no control math here: every formula lives in package
// controller.
//
// The contract:
//   - The daemon's own per-frame code allocates nothing (TestFrameCodeAllocatesNothing
//     checks it in every loop state); parameters are immutable sets built off the
//     hot path and swapped between frames, so a change never tears a frame.
//   - A frame with the wrong length or number, a NaN or an Inf is refused and
//     counted by reason; the last good command is held and nothing non-finite
//     reaches the mirror.
//   - Losing a device opens the loop; the interlocks (divergence, saturation, a
//     silent camera, an unreachable mirror) trip it to a safe shape.
//   - Every refused Control API call returns a gRPC status code and is counted.
//
// Inside, the real-time part is a unit (unit.go) with a small API for the control
// plane — request a state, install or retune parameters, start a calibration, take
// a snapshot — driven one frame at a time by the real-time loop of a device session
// (realtime.go: receive, then delivered), so that tests step it frame by frame
// with no sockets. Frame assembly and validation is a pure value (assembly.go).
// The files: session.go (device connections), realtime.go, assembly.go, state.go,
// stats.go (status figures), interlock.go; control.go (Control API handlers),
// params.go, calibration.go, status.go; metrics.go, telemetry.go (the ring of
// recent frames), record.go (recordings read from it), liveview.go, persist.go,
// pixels.go (a pixel camera's frames centroided chunk by chunk), pixelcal.go
// (its dark, flat and reference: capture, FITS files, restore),
// auth.go, rtsched.go (threads and memory), autonomous.go (the unattended-operation
// supervisor of daemon/supervisor, fed by the real-time goroutine every frame);
// tiptilt.go (the tip-tilt loop: its device session, its real-time goroutine,
// the offload from the high-order loop and its interlocks).
//
// The real-time goroutine has an OS thread of its own only when pinned or under
// SCHED_FIFO (see Realtime); otherwise it runs unlocked, on whichever thread the
// transport woke.
package daemon
