// Package dm simulates a continuous face-sheet deformable mirror in Fried
// geometry: (N+1)×(N+1) actuators at the corners of the N×N Shack–Hartmann
// subapertures, pitch D/N, each with a Gaussian influence function whose value
// at the neighbouring actuator is the configured coupling.
//
// Commands are metres of mirror surface, clipped to ±stroke. The surface is a
// map on the sim/optics pupil grid; the optical path change on reflection is
// twice the surface, which the bench applies (residual = atmosphere − 2·surface).
// A real mirror driven past its stroke or inter-actuator limits can be damaged:
// this model only clips, and says nothing about the limits of real hardware.
//
// The package is pure physics: it must not depend on the bench, gRPC, clocks or
// the scenario files.
package dm
