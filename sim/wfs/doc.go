// Package wfs simulates a Shack–Hartmann wavefront sensor on a sampled pupil.
//
// The sensor divides the pupil grid of sim/optics into N×N square subapertures and
// keeps those whose illuminated fraction reaches a threshold. For each valid
// subaperture it reports the mean gradient of the optical path difference (OPD)
// in radians of tilt, either directly (geometric mode) or by forming the spot
// with an FFT and taking its thresholded centre of gravity (diffractive mode).
// Photon noise follows from the guide-star magnitude, the band zero point, the
// throughput, the frame rate and the illuminated area of each subaperture; read
// noise and background apply to the diffractive detector; geometric mode adds
// the equivalent Gaussian slope noise of a diffraction-limited spot.
//
// Sense allocates nothing: every buffer is made by New. The package is pure
// physics: it must not depend on the bench, gRPC, clocks or the scenario files.
package wfs
