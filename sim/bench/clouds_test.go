package bench_test

import (
	"math"
	"testing"

	"stillsky/sim/bench"
	"stillsky/sim/scenario"
)

// TestCloudsDimTheStar runs the small scenario through a cloud of depth 0.75
// with the turbulence frozen, so that a slope's change from one frame to the next
// is noise alone, and checks against the photon-noise law of the centre of
// gravity, σ² ∝ 1/N (Rousset 1999, from memory), and the photon count of the
// dimmed star: under the cloud the flux is t = 0.25 of the clear sky's and the
// slope-noise variance 1/t = 4 times it; the ramps pass through t = 0.625 halfway.
// The calibration source, inside the instrument, is not dimmed.
func TestCloudsDimTheStar(t *testing.T) {
	s, err := scenario.Load("small")
	if err != nil {
		t.Fatal(err)
	}
	// 500 Hz: frames 0–499 clear, a cloud from 1 s (frame 500) for 2 s with
	// 0.2 s ramps, so frames 600–1399 are at its plateau.
	s.Clouds = scenario.Clouds{{Start: 1, Duration: 2, Depth: 0.75, Ramp: 0.2}}
	sys, err := bench.NewSystem(s)
	if err != nil {
		t.Fatal(err)
	}
	sys.SetFrozen(true)
	slopes := make([]float32, sys.NumSlopes())
	prev := make([]float32, sys.NumSlopes())
	type acc struct{ flux, diff2, n, frames float64 }
	var clear, cloud acc
	for k := range 1400 {
		copy(prev, slopes)
		sys.Frame(slopes)
		if got, want := sys.FrameTime(), float64(k)/500; math.Abs(got-want) > 1e-12 {
			t.Fatalf("frame %d: frame time %g s, want %g", k, got, want)
		}
		want := s.Clouds.Transmission(sys.FrameTime())
		if got := sys.Transmission(); got != want {
			t.Fatalf("frame %d: transmission %g, want %g", k, got, want)
		}
		if k == 550 && math.Abs(want-0.625) > 1e-9 {
			t.Fatalf("halfway down the ramp the transmission is %g, want 0.625", want)
		}
		var a *acc
		switch {
		case k >= 100 && k < 500:
			a = &clear
		case k >= 700 && k < 1400:
			a = &cloud
		default:
			continue
		}
		for _, f := range sys.Flux() {
			a.flux += float64(f)
		}
		a.frames++
		if k == 100 || k == 700 {
			continue
		}
		for i, v := range slopes {
			d := float64(v - prev[i])
			a.diff2 += d * d
			a.n++
		}
	}
	fluxRatio := (cloud.flux / cloud.frames) / (clear.flux / clear.frames)
	noiseRatio := (cloud.diff2 / cloud.n) / (clear.diff2 / clear.n)
	t.Logf("under the cloud: flux %.4f of the clear sky's (want 0.25), slope-noise variance %.3f× (want 4)", fluxRatio, noiseRatio)
	if math.Abs(fluxRatio-0.25) > 0.005 {
		t.Errorf("flux under the cloud %.4f of the clear sky's, want 0.25", fluxRatio)
	}
	// Tens of thousands of differences: the variance ratio is known to about 1.5 %.
	if math.Abs(noiseRatio/4-1) > 0.06 {
		t.Errorf("slope-noise variance under the cloud %.3f× the clear sky's, want 4", noiseRatio)
	}
	if n := testing.AllocsPerRun(20, func() { sys.Frame(slopes) }); n != 0 {
		t.Errorf("a frame under a cloud allocates %g times", n)
	}
	sys.SetTurbulence(false)
	sys.Frame(slopes)
	if got := sys.Transmission(); got != 1 {
		t.Errorf("calibration source dimmed to %g by the cloud", got)
	}
}
