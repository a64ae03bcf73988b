package eye

import (
	"fmt"
	"math"
	"math/cmplx"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/dsp/fourier"
	"gonum.org/v1/gonum/stat"

	"stillsky/sim/optics"
)

// TestPopulationStatistics draws 20,000 eyes and checks each term's sample
// mean and standard deviation (gonum/stat) against the values of Thibos, Hong,
// Bradley & Cheng (2002), "Statistical variation of aberration structure and
// image quality in a normal population of healthy eyes", JOSA A 19, 2329,
// 6 mm pupil, written here independently of the package's table (from memory,
// rounded; defocus is the scenario's choice of ±0.5 D spread of refractive
// state, 1 D = 1.30 µm over 6 mm). Bounds: 5 standard errors for the mean,
// 5% for the spread.
func TestPopulationStatistics(t *testing.T) {
	study := map[int][2]float64{ // Noll: mean, std in µm
		4: {0, 0.65}, 5: {-0.02, 0.17}, 6: {0.08, 0.26},
		7: {-0.02, 0.14}, 8: {0.01, 0.11}, 9: {-0.03, 0.10}, 10: {0.01, 0.08},
		11: {0.128, 0.096}, 12: {0, 0.04}, 13: {0, 0.04}, 14: {0, 0.04}, 15: {0, 0.04},
	}
	const n = 20000
	rng := rand.New(rand.NewPCG(1, 2))
	cols := make([][]float64, len(Population))
	for range n {
		for i, c := range Draw(rng) {
			cols[i] = append(cols[i], c*1e6)
		}
	}
	for i, term := range Population {
		t.Run(term.Name, func(t *testing.T) {
			want, ok := study[term.Noll]
			if !ok {
				t.Fatalf("Noll %d not in the study's table", term.Noll)
			}
			mean, std := stat.MeanStdDev(cols[i], nil)
			if math.Abs(mean-want[0]) > 5*want[1]/math.Sqrt(n) {
				t.Errorf("Noll %d mean %.4f µm, study %.4f µm", term.Noll, mean, want[0])
			}
			if math.Abs(std/want[1]-1) > 0.05 {
				t.Errorf("Noll %d std %.4f µm, study %.4f µm", term.Noll, std, want[1])
			}
		})
	}
	// Dominance: defocus and astigmatism carry most of the variance, as the study found.
	var low, all float64
	for _, term := range Population {
		v := term.Mean*term.Mean + term.Std*term.Std
		all += v
		if term.Noll <= 6 {
			low += v
		}
	}
	if low/all < 0.8 {
		t.Errorf("defocus and astigmatism carry %.2f of the mean square: want >= 0.8", low/all)
	}
}

// TestAccommodationSpectrum runs the fluctuation for 16,384 frames at 30 Hz and
// checks that its periodogram (gonum's FFT, Welch-averaged over 16 segments)
// peaks in the configured 1–2 Hz band (Charman & Heron 1988, Ophthalmic
// Physiol. Opt. 8, 153, from memory; the band is common practice), and that
// the rms is the configured 0.1 D within 10%.
func TestAccommodationSpectrum(t *testing.T) {
	p, err := optics.NewPupil(optics.PupilConfig{Diameter: 6e-3, N: 16})
	if err != nil {
		t.Fatal(err)
	}
	const rate, seg, nseg = 30.0, 1024, 16
	for _, band := range [][2]float64{{1, 2}, {0.5, 1}, {3, 4}} {
		t.Run(fmt.Sprintf("%g-%gHz", band[0], band[1]), func(t *testing.T) {
			e, err := New(Config{Seed: 4, AccommodationRMS: 0.1, Low: band[0], High: band[1], Step: 1 / rate}, p)
			if err != nil {
				t.Fatal(err)
			}
			x := make([]float64, seg*nseg)
			for i := range x {
				e.Advance(1 / rate)
				x[i] = e.Fluctuation() / DefocusPerDioptre(6e-3)
			}
			rms := math.Sqrt(stat.Variance(x, nil))
			fft := fourier.NewFFT(seg)
			power := make([]float64, seg/2+1)
			for s := range nseg {
				for k, c := range fft.Coefficients(nil, x[s*seg:(s+1)*seg]) {
					power[k] += cmplx.Abs(c) * cmplx.Abs(c)
				}
			}
			peak := 1
			for k := 1; k < len(power); k++ {
				if power[k] > power[peak] {
					peak = k
				}
			}
			f := fft.Freq(peak) * rate
			t.Logf("band %v Hz: peak %.3f Hz, rms %.4f D", band, f, rms)
			if f < band[0] || f > band[1] {
				t.Errorf("peak at %.3f Hz: want in [%g, %g] Hz", f, band[0], band[1])
			}
			if math.Abs(rms/0.1-1) > 0.1 {
				t.Errorf("rms %.4f D: want 0.1 D within 10%%", rms)
			}
		})
	}
}

// TestAdvanceOPDAllocateNothing: both run once per frame.
func TestAdvanceOPDAllocateNothing(t *testing.T) {
	p, _ := optics.NewPupil(optics.PupilConfig{Diameter: 6e-3, N: 16})
	e, err := New(Config{Seed: 1, AccommodationRMS: 0.1, Low: 1, High: 2, Step: 1.0 / 30}, p)
	if err != nil {
		t.Fatal(err)
	}
	out := make([]float64, p.N*p.N)
	if n := testing.AllocsPerRun(100, func() { e.Advance(1.0 / 30); e.OPD(out) }); n != 0 {
		t.Errorf("%v allocations per frame, want 0", n)
	}
}

// TestNewRefuses: a bad configuration is refused with the value named.
func TestNewRefuses(t *testing.T) {
	p, _ := optics.NewPupil(optics.PupilConfig{Diameter: 6e-3, N: 16})
	for name, c := range map[string]Config{
		"step":    {Low: 1, High: 2},
		"band":    {Low: 2, High: 1, Step: 0.01},
		"nyquist": {Low: 1, High: 20, Step: 1.0 / 30},
		"rms":     {Low: 1, High: 2, Step: 0.01, AccommodationRMS: math.NaN()},
	} {
		t.Run(name, func(t *testing.T) {
			if _, err := New(c, p); err == nil {
				t.Errorf("%+v accepted", c)
			} else {
				t.Log(err)
			}
		})
	}
}
