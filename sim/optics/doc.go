// Package optics holds the optical geometry and Fourier optics of the simulated
// bench: the sampled pupil, Noll-ordered Zernike modes, a 2-D FFT with preallocated
// buffers, the point-spread function and Strehl ratio of a residual wavefront, and
// the residual rms.
//
// All maps are []float64 on the N×N pupil grid (index iy*N+ix). Wavefronts are
// optical path differences in metres unless a function says otherwise.
//
// It is pure physics: it must not depend on time, I/O, gRPC or any other package of
// stillsky.
package optics
