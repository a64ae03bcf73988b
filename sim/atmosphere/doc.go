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
// Sampling: the screens have the pupil's sample spacing, and each is stored as its
// band-limited field at the four half-sample offsets (four FFTs of one spectrum,
// shifted by the DFT shift theorem), that is on a grid of half the spacing. A layer
// is sampled between the nodes of that grid by six-point Lagrange interpolation,
// which is nearly exact there because the screen's whole band lies below half that
// grid's Nyquist frequency (amplitude response 0.95 or more up to the screen's
// Nyquist frequency at any offset); integer shifts are exact. So the phase's
// statistics are the same at every sub-sample offset, and its change between
// frames is that of the band-limited screen translated: the temporal structure
// function of a layer equals its spatial one at the separation vτ, sub-sample
// shifts included, within 1% (TestTaylorFrozenFlow). Bilinear interpolation of
// the samples, which this replaced, made that change 8–21% too small at shifts of
// 0.1 to 3 samples (up to 39% at the worst offsets), so the servo-lag error came
// out too small; on the built-in small scenario it raised the closed-loop Strehl by
// about 0.035. What no sampled screen has is the power above the grid's Nyquist
// frequency: against the continuum, the change over shifts of about one sample is
// 13% below Kolmogorov's at 0.4 to 1.6 samples, 4% at 2 to 6
// (TestTemporalStructureFunction). Slopes averaged over subapertures several
// samples wide are much less affected. The price is four times the screen memory
// and generation work, and about four times the interpolation work of OPD.
//
// It is pure physics: it depends on package optics for the pupil grid and the FFT,
// on gonum through it, and on nothing that does I/O or reads clocks.
package atmosphere
