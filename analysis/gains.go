package analysis

import (
	"fmt"
	"math"
)

// noisePlateau is the share of the highest frequencies of a pseudo-open-loop
// spectrum taken as its white-noise level: the turbulence's temporal spectrum
// falls steeply beyond f·v for the mode's spatial scale, so the top quarter up to
// the Nyquist frequency is noise (common practice, after Gendron & Léna 1994).
const noisePlateau = 0.25

// ModalGains is the result of OptimiseGains.
type ModalGains struct {
	// Gains are the optimal loop gains per mode (absolute: the integrator gain of
	// that mode, not relative to a global gain).
	Gains []float64
	// Residual is the predicted residual variance of each mode at its gain, in the
	// units² of the spectra.
	Residual []float64
	// Noise is each mode's white-noise level (one-sided PSD) found in its spectrum.
	Noise []float64
}

// OptimiseGains chooses each mode's gain to minimise its predicted closed-loop
// residual (Gendron & Léna, A&A 291 (1994) 337): from the pseudo-open-loop
// spectrum P(f) of the mode, the noise level N is the mean of the top quarter of
// frequencies, the turbulence spectrum is max(P − N, 0), and the residual at
// gain g is
//
//	σ²(g) = ∫ |E(f; g)|² max(P(f) − N, 0) df + N·(F/2)·noiseGain(g),
//
// with l's leak, delay and frame rate F. Gains are searched over candidates (nil:
// 0 and 60 values up to 0.9 of the stability limit; 0 opens the mode).
func OptimiseGains(spectra []Spectrum, l Loop, candidates []float64) (ModalGains, error) {
	if len(spectra) == 0 {
		return ModalGains{}, fmt.Errorf("analysis: no modal spectra")
	}
	probe := l
	probe.Gain = 0.1
	if err := probe.Validate(); err != nil {
		return ModalGains{}, err
	}
	if candidates == nil {
		gmax := probe.MaxGain()
		candidates = []float64{0}
		for i := 1; i <= 60; i++ {
			candidates = append(candidates, 0.9*gmax*float64(i)/60)
		}
	}
	nf := len(spectra[0].Freq)
	if nf < 8 {
		return ModalGains{}, fmt.Errorf("analysis: spectra of %d frequencies: need at least 8", nf)
	}
	df := spectra[0].Freq[1] - spectra[0].Freq[0]
	// Per candidate: |E|² at each frequency and the noise gain.
	rej := make([][]float64, len(candidates))
	ng := make([]float64, len(candidates))
	for c, g := range candidates {
		m := l
		m.Gain = g
		rej[c] = make([]float64, nf)
		if g == 0 {
			for k := range rej[c] {
				rej[c][k] = 1
			}
			continue
		}
		if !(g > 0) || !m.Stable() {
			return ModalGains{}, fmt.Errorf("analysis: candidate gain %g: must be >= 0 and stable", g)
		}
		for k, f := range spectra[0].Freq {
			rej[c][k] = m.RejectionPower(f)
		}
		ng[c] = m.NoiseGain()
	}
	out := ModalGains{Gains: make([]float64, len(spectra)), Residual: make([]float64, len(spectra)), Noise: make([]float64, len(spectra))}
	for i, s := range spectra {
		if len(s.Power) != nf || len(s.Freq) != nf {
			return ModalGains{}, fmt.Errorf("analysis: spectrum %d has %d frequencies, want %d", i, len(s.Power), nf)
		}
		n := noiseLevel(s)
		best, bestCost := 0, math.Inf(1)
		for c := range candidates {
			cost := n * l.FrameRate / 2 * ng[c]
			for k, p := range s.Power {
				if p > n {
					cost += rej[c][k] * (p - n) * df
				}
			}
			if cost < bestCost {
				best, bestCost = c, cost
			}
		}
		out.Gains[i], out.Residual[i], out.Noise[i] = candidates[best], bestCost, n
	}
	return out, nil
}

// noiseLevel is the mean of the top quarter of a spectrum (noisePlateau).
func noiseLevel(s Spectrum) float64 {
	top := int(math.Ceil(float64(len(s.Power)) * (1 - noisePlateau)))
	n := 0.0
	for _, p := range s.Power[top:] {
		n += p
	}
	return n / float64(len(s.Power)-top)
}

// ModalResidual returns the residual OptimiseGains predicts for one mode of
// pseudo-open-loop spectrum s at l's gain (0 opens the mode).
func ModalResidual(s Spectrum, l Loop) float64 {
	n := noiseLevel(s)
	df := s.Freq[1] - s.Freq[0]
	cost := 0.0
	if l.Gain > 0 {
		cost = n * l.FrameRate / 2 * l.NoiseGain()
	}
	for k, p := range s.Power {
		if p <= n {
			continue
		}
		r := 1.0
		if l.Gain > 0 {
			r = l.RejectionPower(s.Freq[k])
		}
		cost += r * (p - n) * df
	}
	return cost
}
