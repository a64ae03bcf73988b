// Package atmosphere simulates optical turbulence: von Kármán phase screens made by
// FFT with subharmonic compensation of the lowest frequencies, and several frozen-flow
// layers sampled on the pupil grid of package optics.
//
// Phase screens are in radians at the reference wavelength of 500 nm; the layers'
// sum is returned as optical path difference in metres, which is achromatic.
//
// How the layers stay seamless and never repeat. Each layer owns two periodic FFT
// screens X and Y, a few pupil diameters wide, and samples φ = cos θ·X + sin θ·Y at
// the pupil shifted by the wind. Because the FFT part is periodic, wrapping around the
// screen edge has no seam; the subharmonic part is a sum of plane waves translated
// exactly by a phase factor. θ runs from 0 to π/2 during one screen-crossing time
// (screen width / wind speed); then X is dropped, Y takes its place and a freshly
// generated screen becomes the new Y. X and Y are independent Gaussian fields with the
// same covariance C, so cos²θ·C + sin²θ·C = C: the spatial statistics are exact at
// every instant, and φ is continuous in time. The extra temporal decorrelation is
// 1 − cos(Δθ), about 10⁻⁶ over the few milliseconds of servo lag that matter to a
// loop. The correlation of φ with itself one crossing time later is sin θ cos θ
// (at most 0.5, 1/π on average) and zero after two: the screen never repeats.
// Fresh screens are generated in slices (noise rows, row FFTs, column FFTs) spread
// over the first three quarters of a crossing time, so no frame pays for a whole
// screen. One complex FFT gives two independent screens (its real and imaginary
// parts), so a generation runs every other crossing time. The random numbers are
// drawn in the same order however the work is sliced.
//
// Sampling: the screens have the pupil's sample spacing; a sub-sample shift is a
// bilinear interpolation (integer shifts are exact). At a half-sample offset it
// attenuates spatial frequency f by cos²(π f Δx) in power: the one-sample structure
// function dips by about 20% (25% for a diagonal shift), a quarter-Nyquist frequency
// by 15%. Over a run this modulates the finest scales at the sample-crossing rate
// v/Δx and biases the DM fitting error low by roughly 5% on average (our estimate
// from Φ ∝ f^(−11/3) above the DM cut-off), on top of the
// power above the grid's Nyquist frequency that no sampled screen has. Together they
// make the change of the phase over shifts of about one sample smaller than the
// continuum's: with piston and tilt removed, 28% below it at 0.4 to 1.6 samples,
// 10% at 2 to 6, 5% beyond (TestTemporalStructureFunction). Slopes averaged over
// subapertures several samples wide are much less affected. Cubic
// convolution would remove most of it below half the Nyquist frequency, at about
// twice the cost of OPD; it is not done.
//
// It is pure physics: it depends on package optics for the pupil grid and the FFT,
// on gonum through it, and on nothing that does I/O or reads clocks.
package atmosphere
