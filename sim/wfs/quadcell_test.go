package wfs_test

import (
	"math"
	"math/rand/v2"
	"strings"
	"testing"

	"stillsky/sim/wfs"
)

// The quad cell's noise at the null against the formula of NoiseRMS
// (σ·√(π/2)·√(N+4σ_r²)/N, the Gaussian-spot form of the quad-cell error in
// Tyson, Principles of Adaptive Optics, and Hardy 1998, *from memory*), by a
// Monte-Carlo of 20 000 frames in the photon-limited and the read-noise-limited
// regimes. The formula is first order in 1/SNR (the sum in the denominator is
// taken as noiseless), so the rows keep SNR ≥ 15.
func TestQuadCellNoise(t *testing.T) {
	const arcsec = math.Pi / 180 / 3600
	for _, tc := range []struct {
		name           string
		photons, readN float64
	}{
		{"photon-limited", 1000, 0},
		{"read-noise-limited", 1000, 20},
		{"mixed", 400, 5},
	} {
		t.Run(tc.name, func(t *testing.T) {
			q, err := wfs.NewQuadCell(wfs.QuadCellConfig{SpotSigma: 0.4 * arcsec, Photons: tc.photons, ReadNoise: tc.readN})
			if err != nil {
				t.Fatal(err)
			}
			rng := rand.New(rand.NewPCG(7, 11))
			const n = 20000
			var sxx, syy float64
			for range n {
				x, y := q.Sense(0, 0, rng)
				sxx += x * x
				syy += y * y
			}
			got := math.Sqrt((sxx + syy) / (2 * n))
			want := q.NoiseRMS()
			if r := got / want; math.Abs(r-1) > 0.05 {
				t.Errorf("noise %.4g arcsec, formula %.4g arcsec: ratio %.3f, want within 5%%", got/arcsec, want/arcsec, r)
			}
		})
	}
}

// The noiseless response has unit slope at the null (the erf expansion of a
// Gaussian's halves) and is odd.
func TestQuadCellResponse(t *testing.T) {
	const sigma = 1e-6
	q, err := wfs.NewQuadCell(wfs.QuadCellConfig{SpotSigma: sigma, Photons: 1000})
	if err != nil {
		t.Fatal(err)
	}
	x, y := q.Sense(0.01*sigma, -0.02*sigma, nil)
	if math.Abs(x/(0.01*sigma)-1) > 1e-3 || math.Abs(y/(-0.02*sigma)-1) > 1e-3 {
		t.Errorf("response (%g, %g) to (%g, %g): want unit slope", x, y, 0.01*sigma, -0.02*sigma)
	}
	// At x = σ the estimate is σ·√(π/2)·erf(1/√2).
	x, _ = q.Sense(sigma, 0, nil)
	if want := sigma * math.Sqrt(math.Pi/2) * math.Erf(1/math.Sqrt2); math.Abs(x-want) > 1e-12*sigma {
		t.Errorf("response at σ: %g, want %g", x, want)
	}
}

func TestQuadCellRefusals(t *testing.T) {
	for _, tc := range []struct {
		name string
		c    wfs.QuadCellConfig
		want string
	}{
		{"spot", wfs.QuadCellConfig{SpotSigma: 0, Photons: 1}, "spot sigma"},
		{"photons", wfs.QuadCellConfig{SpotSigma: 1, Photons: math.NaN()}, "photons"},
		{"read noise", wfs.QuadCellConfig{SpotSigma: 1, Photons: 1, ReadNoise: -1}, "read noise"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			_, err := wfs.NewQuadCell(tc.c)
			if err == nil || !strings.Contains(err.Error(), tc.want) {
				t.Errorf("error %v: want one naming %q", err, tc.want)
			}
		})
	}
}

func TestQuadCellAllocations(t *testing.T) {
	q, err := wfs.NewQuadCell(wfs.QuadCellConfig{SpotSigma: 1e-6, Photons: 200, ReadNoise: 2})
	if err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(1, 2))
	if n := testing.AllocsPerRun(200, func() { q.Sense(1e-7, -2e-7, rng) }); n != 0 {
		t.Errorf("Sense: %v allocations per frame, want 0", n)
	}
}

// A cloud of transmission t dims the quad cell: the sum it detects falls to
// t·N, the noiseless estimate does not change (a ratio), and the noise
// variance at the null grows as 1/t in the photon-limited regime (the
// formula of NoiseRMS with N → t·N); Monte-Carlo of 20 000 frames, within
// 10% in variance.
func TestQuadCellTransmission(t *testing.T) {
	const arcsec = math.Pi / 180 / 3600
	q, err := wfs.NewQuadCell(wfs.QuadCellConfig{SpotSigma: 0.4 * arcsec, Photons: 1000})
	if err != nil {
		t.Fatal(err)
	}
	x0, _ := q.Sense(0.05*arcsec, 0, nil)
	if q.Flux() != 1000 {
		t.Fatalf("clear sky: flux %g, want 1000", q.Flux())
	}
	clear := q.NoiseRMS()
	q.SetTransmission(0.25)
	x1, _ := q.Sense(0.05*arcsec, 0, nil)
	if math.Abs(q.Flux()-250) > 1e-9 || math.Abs(x1-x0) > 1e-12*math.Abs(x0) {
		t.Fatalf("transmission 0.25: flux %g (want 250), estimate %g (want %g)", q.Flux(), x1, x0)
	}
	rng := rand.New(rand.NewPCG(7, 8))
	var ss float64
	const n = 20000
	for range n {
		x, _ := q.Sense(0, 0, rng)
		ss += x * x
	}
	if got, want := ss/n, clear*clear/0.25; math.Abs(got/want-1) > 0.1 {
		t.Errorf("noise variance under the cloud %.4g, want %.4g (clear %.4g / t)", got, want, clear*clear)
	}
}
