// Package bench is the simulated optical bench. System composes the pure
// physics of sim/atmosphere, sim/dm, sim/wfs and sim/optics for one scenario
// and advances it frame by frame; the server around it keeps time and serves
// the camera and mirror endpoints over gRPC.
//
// System itself reads no clock and knows nothing of gRPC: it is deterministic
// for a given scenario (seeds included), so accuracy tests drive it directly.
// The physics packages must not depend on this package.
package bench
