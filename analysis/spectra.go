package analysis

import (
	"fmt"
	"math"

	"gonum.org/v1/gonum/dsp/fourier"
)

// Spectrum is a one-sided power spectral density: Power[i] (units² per hertz)
// at Freq[i] hertz, from 0 to the Nyquist frequency. Its integral over
// frequency, Σ Power·Δf, is the variance of the series.
type Spectrum struct {
	Freq, Power []float64
}

// PSD estimates the power spectral density of series x sampled at rate hertz by
// Welch's method (Welch, IEEE Trans. Audio Electroacoust. 15 (1967) 70): segments
// of the given length (even, >= 8, at most len(x)) overlapping by half, each with
// its mean removed and a Hann window, their periodograms averaged and scaled so
// that the spectrum integrates to the variance.
func PSD(x []float64, rate float64, segment int) (Spectrum, error) {
	switch {
	case !(rate > 0) || math.IsInf(rate, 0):
		return Spectrum{}, fmt.Errorf("analysis: sample rate %g Hz: must be > 0", rate)
	case segment < 8 || segment%2 != 0:
		return Spectrum{}, fmt.Errorf("analysis: segment of %d samples: must be even and >= 8", segment)
	case len(x) < segment:
		return Spectrum{}, fmt.Errorf("analysis: %d samples: fewer than one segment of %d", len(x), segment)
	}
	w := make([]float64, segment)
	wss := 0.0
	for i := range w {
		w[i] = 0.5 - 0.5*math.Cos(2*math.Pi*float64(i)/float64(segment))
		wss += w[i] * w[i]
	}
	fft := fourier.NewFFT(segment)
	buf := make([]float64, segment)
	coef := make([]complex128, segment/2+1)
	out := Spectrum{Freq: make([]float64, segment/2+1), Power: make([]float64, segment/2+1)}
	n := 0
	for start := 0; start+segment <= len(x); start += segment / 2 {
		mean := 0.0
		for _, v := range x[start : start+segment] {
			mean += v
		}
		mean /= float64(segment)
		for i, v := range x[start : start+segment] {
			buf[i] = (v - mean) * w[i]
		}
		fft.Coefficients(coef, buf)
		for i, c := range coef {
			out.Power[i] += real(c)*real(c) + imag(c)*imag(c)
		}
		n++
	}
	// One-sided density: |X|²/(rate·Σw²), doubled except at 0 and Nyquist.
	for i := range out.Power {
		out.Freq[i] = float64(i) * rate / float64(segment)
		out.Power[i] /= float64(n) * rate * wss
		if i != 0 && i != segment/2 {
			out.Power[i] *= 2
		}
	}
	return out, nil
}

// ModalSpectra returns the PSD of each mode of series (frames × modes, one row
// per frame), as PSD does.
func ModalSpectra(series [][]float64, rate float64, segment int) ([]Spectrum, error) {
	if len(series) == 0 {
		return nil, fmt.Errorf("analysis: no frames")
	}
	modes := len(series[0])
	col := make([]float64, len(series))
	out := make([]Spectrum, modes)
	for j := range modes {
		for k, row := range series {
			if len(row) != modes {
				return nil, fmt.Errorf("analysis: frame %d has %d modes, want %d", k, len(row), modes)
			}
			col[k] = row[j]
		}
		s, err := PSD(col, rate, segment)
		if err != nil {
			return nil, err
		}
		out[j] = s
	}
	return out, nil
}

// MeasuredRejection returns the measured rejection |E(f)|² of a closed loop:
// the closed-loop residual spectra over the pseudo-open-loop spectra of the same
// modes and frames, their sums over modes divided frequency by frequency (so the
// modes with most power weigh most). The two lists must match in modes and
// frequencies; frequencies where the open-loop power is zero get NaN.
func MeasuredRejection(closed, open []Spectrum) (Spectrum, error) {
	if len(closed) == 0 || len(closed) != len(open) {
		return Spectrum{}, fmt.Errorf("analysis: %d closed-loop and %d open-loop spectra", len(closed), len(open))
	}
	nf := len(closed[0].Freq)
	out := Spectrum{Freq: append([]float64(nil), closed[0].Freq...), Power: make([]float64, nf)}
	den := make([]float64, nf)
	for i := range closed {
		if len(closed[i].Power) != nf || len(open[i].Power) != nf {
			return Spectrum{}, fmt.Errorf("analysis: spectrum %d has another length", i)
		}
		for k := range nf {
			out.Power[k] += closed[i].Power[k]
			den[k] += open[i].Power[k]
		}
	}
	for k := range nf {
		if den[k] == 0 {
			out.Power[k] = math.NaN()
			continue
		}
		out.Power[k] /= den[k]
	}
	return out, nil
}
