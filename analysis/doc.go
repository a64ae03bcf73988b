// Package analysis is the loop's own arithmetic about itself: the error budget of
// an adaptive-optics loop (fitting, Shack–Hartmann aliasing, servo lag, noise), the
// loop's transfer functions, modal temporal spectra, the turbulence estimated from
// closed-loop data (pseudo-open-loop slopes, r0, L0, wind speed, τ0), and modal gains
// optimised from those spectra.
//
// Like package controller it is pure computation: no I/O, no clocks, no goroutines,
// no logging, no gRPC or Prometheus. The daemon, the command line and the report
// call it on live or recorded data; nothing here runs on the per-frame hot path.
//
// Units are SI: metres, seconds, hertz, radians of phase. Variances are rad² at the
// wavelength named beside them. r0 is given at 500 nm towards the zenith, as site
// seeing is quoted, and scaled as r0 ∝ λ^(6/5) (cos z)^(3/5) (Fried 1966; Roddier,
// Progress in Optics XIX, 1981).
//
// The loop model throughout is the sampled one the controller implements: the
// sensor reading frame k sees the command issued after frame k − d,
// e_k = φ_k − c_{k−d}, and c_k = (1 − ℓ) c_{k−1} + g (e_k + n_k) with measurement
// noise n_k. Its rejection (error) transfer function is
//
//	E(z) = (1 − (1 − ℓ) z⁻¹) / (1 − (1 − ℓ) z⁻¹ + g z⁻ᵈ)
//
// and the noise reaches the residual through H(z) = g z⁻ᵈ / (1 − (1 − ℓ) z⁻¹ + g z⁻ᵈ)
// (standard discrete-time control).
package analysis
