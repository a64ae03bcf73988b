// Package bench is the simulated optical bench. System composes the pure
// physics of sim/atmosphere, sim/dm, sim/wfs and sim/optics for one scenario
// and advances it frame by frame; Server keeps time around it and serves the
// camera and mirror endpoints over gRPC.
//
// The contract: System reads no clock and knows nothing of gRPC; it is
// deterministic for a given scenario (seeds included), so accuracy tests drive it
// directly. Lockstep, frame k shows exactly the command that answered frame
// k−DelayFrames; free-running, frame k is stamped with tick k of the camera clock
// and shows the command that had arrived by tick k−1. The physics packages must
// not depend on this package, and the bench changes no process-wide setting: a
// process that wants IdlePriority sets GOMAXPROCS itself (IdleExtraProcs).
//
// Server's parts, one file each: camera.go (the frame ring and the camera
// stream), mirror.go (the command log and the mirror stream), clock.go (the
// free-running and lockstep clocks), gate.go (the gated lockstep bench's hold
// before a requested sky frame), science.go (the science camera), stats.go
// (true figures of merit), metrics.go (the bench's own Prometheus registry);
// serve.go listens and serves them.
package bench
