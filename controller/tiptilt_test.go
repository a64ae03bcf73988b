package controller_test

import (
	"math"
	"math/cmplx"
	"math/rand/v2"
	"strings"
	"testing"

	"gonum.org/v1/gonum/dsp/fourier"

	"stillsky/controller"
	"stillsky/sim/wfs"
)

const arcsec = math.Pi / 180 / 3600

// tiltSeries synthesises one axis of periodic atmospheric tilt, n samples at
// rate fs, with the two-regime temporal spectrum of the Zernike tilt seen by an
// aperture D under wind v: S(f) ∝ f^(−2/3) below f_c ≈ 0.3·v/D and
// ∝ f^(−11/3) above (Conan, Rousset & Madec 1995, "Wave-front temporal spectra
// in high-resolution imaging through turbulence", JOSA A 12, 1559 — *from
// memory*), scaled to rms. Random phases and Rayleigh amplitudes are drawn
// from rng by gonum's inverse FFT; the mean is zero.
func tiltSeries(n int, fs, fc, rms float64, rng *rand.Rand) []float64 {
	fft := fourier.NewFFT(n)
	coef := make([]complex128, n/2+1)
	for k := 1; k < n/2; k++ {
		f := float64(k) * fs / float64(n)
		s := math.Pow(f/fc, -2.0/3)
		if f > fc {
			s = math.Pow(f/fc, -11.0/3)
		}
		a := math.Sqrt(s / 2)
		coef[k] = complex(a*rng.NormFloat64(), a*rng.NormFloat64())
	}
	x := fft.Sequence(nil, coef)
	var ms float64
	for _, v := range x {
		ms += v * v
	}
	scale := rms / math.Sqrt(ms/float64(n))
	for i := range x {
		x[i] *= scale
	}
	return x
}

// rejection is E(z) = (1 − k·z⁻¹)/(1 − k·z⁻¹ + g·z⁻¹), k = 1 − ℓ, at z = exp(iω):
// the residual over the input for an integrator whose command is applied one
// frame after the measurement (TipTilt's documented timing).
func rejection(g, leak, omega float64) complex128 {
	zi := cmplx.Exp(complex(0, -omega))
	k := complex(1-leak, 0)
	return (1 - k*zi) / (1 - k*zi + complex(g, 0)*zi)
}

// servoVariance is the residual variance of a periodic input x under the
// rejection E: Parseval over gonum's FFT bins, Σ|E(ω_k)·X_k|²/N².
func servoVariance(x []float64, g, leak float64) float64 {
	n := len(x)
	c := fourier.NewFFT(n).Coefficients(nil, x)
	var s float64
	for k, v := range c {
		w := 2.0
		if k == 0 || k == n/2 {
			w = 1
		}
		e := rejection(g, leak, 2*math.Pi*float64(k)/float64(n))
		s += w * real(e*v*cmplx.Conj(e*v))
	}
	return s / float64(n*n)
}

// noiseGain is ∫|1 − E(e^{iω})|² dω/2π, the residual variance per unit of
// white measurement-noise variance, by the midpoint rule on 8192 points.
func noiseGain(g, leak float64) float64 {
	const m = 8192
	var s float64
	for i := range m {
		w := 2 * math.Pi * (float64(i) + 0.5) / m
		h := 1 - rejection(g, leak, w)
		s += real(h * cmplx.Conj(h))
	}
	return s / m
}

// TestTipTiltServoAndNoiseLimit checks that the tip-tilt loop removes tilt to
// its own servo and noise limit. A lockstep run (no clocks: frame k's residual
// is sensed, the command applied from frame k+1) closes TipTilt on the quad
// cell of sim/wfs against two axes of periodic atmospheric tilt, and the
// residual variance over the second period is compared with
//
//	σ²_res = ∫|E(f)|²·S_tilt(f) df + σ²_n·∫|1 − E(f)|² df
//
// the rejection transfer function integrated against the tilt's temporal
// spectrum plus the sensor noise carried through the noise transfer function
// (Hardy 1998, Adaptive Optics for Astronomical Telescopes, servo-lag and
// noise terms of the tilt error budget; Tyson, Principles of Adaptive Optics —
// *from memory*), with σ_n from the quad-cell formula (QuadCell.NoiseRMS).
// Three gains put the loop on the servo-limited side, near the optimum and on
// the noise-limited side; each must match within 10%, and the ratio of the
// two terms must show the expected regime.
func TestTipTiltServoAndNoiseLimit(t *testing.T) {
	const (
		n    = 8192
		fs   = 200.0          // tip-tilt frame rate, Hz
		fc   = 0.3 * 10 / 8.0 // 0.3·v/D for v = 10 m/s, D = 8 m
		rms  = 0.15 * arcsec  // tilt per axis
		leak = 0.001
	)
	qc, err := wfs.NewQuadCell(wfs.QuadCellConfig{SpotSigma: 0.5 * arcsec, Photons: 150, ReadNoise: 3})
	if err != nil {
		t.Fatal(err)
	}
	sn := qc.NoiseRMS()
	rng := rand.New(rand.NewPCG(3, 5))
	tx := tiltSeries(n, fs, fc, rms, rng)
	ty := tiltSeries(n, fs, fc, rms, rng)
	for _, tc := range []struct {
		name string
		gain float64
		// lo, hi bound servo/noise variance: the expected regime.
		lo, hi float64
	}{
		{"servo-limited", 0.01, 10, math.Inf(1)},
		{"near optimum", 0.1, 1.0 / 3, 3},
		{"noise-limited", 0.8, 0, 0.1},
	} {
		t.Run(tc.name, func(t *testing.T) {
			tt, err := controller.NewTipTilt(controller.TipTiltParams{Gain: tc.gain, Leak: leak, Stroke: 5 * arcsec})
			if err != nil {
				t.Fatal(err)
			}
			var cx, cy, ss float64
			for k := range 2 * n {
				rx, ry := tx[k%n]-cx, ty[k%n]-cy
				if k >= n {
					ss += rx*rx + ry*ry
				}
				mx, my := qc.Sense(rx, ry, rng)
				var ok bool
				cx, cy, _, ok = tt.Step(mx, my)
				if !ok {
					t.Fatalf("frame %d: measurement (%g, %g) refused", k, mx, my)
				}
			}
			got := ss / (2 * n)
			servo := (servoVariance(tx, tc.gain, leak) + servoVariance(ty, tc.gain, leak)) / 2
			noise := sn * sn * noiseGain(tc.gain, leak)
			want := servo + noise
			t.Logf("gain %g: residual %.4f arcsec rms per axis, predicted %.4f (servo %.4f, noise %.4f; open loop %.3f)",
				tc.gain, math.Sqrt(got)/arcsec, math.Sqrt(want)/arcsec, math.Sqrt(servo)/arcsec, math.Sqrt(noise)/arcsec, rms/arcsec)
			if r := got / want; math.Abs(r-1) > 0.10 {
				t.Errorf("residual variance %.4g, predicted %.4g: ratio %.3f, want within 10%%", got, want, r)
			}
			if r := servo / noise; !(r >= tc.lo && r <= tc.hi) {
				t.Errorf("servo/noise variance %.3g: want in [%g, %g] for this regime", r, tc.lo, tc.hi)
			}
		})
	}
}

func TestTipTiltStroke(t *testing.T) {
	tt, err := controller.NewTipTilt(controller.TipTiltParams{Gain: 0.5, Stroke: 1})
	if err != nil {
		t.Fatal(err)
	}
	for range 10 {
		tt.Step(10, -10)
	}
	cx, cy, sat, ok := tt.Step(10, -10)
	if cx != 1 || cy != -1 || !sat || !ok {
		t.Errorf("after a large tilt: command (%g, %g), saturated %v, ok %v; want (1, -1), true, true", cx, cy, sat, ok)
	}
	// The clamped state unwinds at once (anti-windup).
	if cx, _, _, _ = tt.Step(-0.4, 0); cx != 0.8 {
		t.Errorf("first step back: %g, want 0.8", cx)
	}
	if cx, cy, _, ok = tt.Step(math.NaN(), 0); ok || cx != 0.8 || cy != -1 {
		t.Errorf("NaN measurement: (%g, %g), ok %v; want the command held and ok false", cx, cy, ok)
	}
}

func TestTipTiltParamsRefused(t *testing.T) {
	good := controller.TipTiltParams{Gain: 0.3, Leak: 0.01, Stroke: 1e-5}
	tt, err := controller.NewTipTilt(good)
	if err != nil {
		t.Fatal(err)
	}
	for _, tc := range []struct {
		name string
		p    controller.TipTiltParams
		want string
	}{
		{"gain", controller.TipTiltParams{Gain: 2, Stroke: 1}, "tip-tilt gain"},
		{"leak", controller.TipTiltParams{Gain: 0.1, Leak: 1, Stroke: 1}, "tip-tilt leak"},
		{"stroke", controller.TipTiltParams{Gain: 0.1, Stroke: math.Inf(1)}, "tip-tilt stroke"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			if err := tt.SetParams(tc.p); err == nil || !strings.Contains(err.Error(), tc.want) {
				t.Errorf("error %v: want one naming %q", err, tc.want)
			}
			if tt.Params() != good {
				t.Errorf("a refused set replaced the old one: %+v", tt.Params())
			}
		})
	}
}

func TestTipTiltAllocations(t *testing.T) {
	tt, err := controller.NewTipTilt(controller.TipTiltParams{Gain: 0.3, Stroke: 1e-5})
	if err != nil {
		t.Fatal(err)
	}
	if n := testing.AllocsPerRun(500, func() { tt.Step(1e-7, -1e-7) }); n != 0 {
		t.Errorf("Step: %v allocations per frame, want 0", n)
	}
}
