package bench

import (
	"math"
	"testing"
)

// meanSlopes returns the mean x and y slope over the valid subapertures (the
// layout is x, y per subaperture).
func meanSlopes(s []float32) (mx, my float64) {
	h := len(s) / 2
	for i := 0; i < h; i++ {
		mx += float64(s[2*i])
		my += float64(s[2*i+1])
	}
	return mx / float64(h), my / float64(h)
}

// A laser beacon's light goes up and comes back down through the same air, so the
// atmosphere's tip and tilt do not move its image (common practice; e.g. Rigaut &
// Gendron 1992, "Laser guide star in adaptive optics: the tilt determination
// problem", Astron. Astrophys. 261, 677): the lgs scenario's sensor measures no
// global tilt from the turbulence, where the same bench on the natural star does,
// and it still sees the mirror's tilt, which is in the return path only.
func TestBeaconTiltUnmeasured(t *testing.T) {
	lgs := load(t, "lgs")
	ngs := *lgs
	ngs.LaserGuideStar = nil
	var tiltLGS, tiltNGS, rmsLGS float64
	for _, c := range []struct {
		s    *System
		tilt *float64
	}{{newSystem(t, lgs), &tiltLGS}, {newSystem(t, &ngs), &tiltNGS}} {
		c.s.SetNoise(false)
		slopes := make([]float32, c.s.NumSlopes())
		for k := 0; k < 50; k++ {
			c.s.Frame(slopes)
			mx, my := meanSlopes(slopes)
			*c.tilt += (mx*mx + my*my) / 50
			if c.tilt == &tiltLGS {
				var r float64
				for _, v := range slopes {
					r += float64(v) * float64(v)
				}
				rmsLGS += r / float64(len(slopes)) / 50
			}
		}
	}
	t.Logf("mean-square global tilt of the slopes: beacon %.3g rad², natural star %.3g rad²; beacon slope variance %.3g rad²", tiltLGS, tiltNGS, rmsLGS)
	// The mean slope over the subapertures is not quite the least-squares tilt
	// over the pupil that the beacon removes (the partly lit subapertures at the
	// edges and around the obstruction weigh differently): measured 1.3% of the
	// natural star's.
	if !(tiltLGS < 0.05*tiltNGS) {
		t.Fatalf("the beacon's sensor measures a global tilt of %.3g rad², want < 5%% of the natural star's %.3g rad²", tiltLGS, tiltNGS)
	}
	if !(rmsLGS > 0.1*tiltNGS) {
		t.Fatalf("the beacon's slopes carry %.3g rad²: the high orders should remain", rmsLGS)
	}
	// The mirror's tilt is seen: a command that tilts the whole mirror moves the
	// mean slope as on the natural star.
	s := newSystem(t, lgs)
	s.SetTurbulence(false)
	s.SetNoise(false)
	cmd := make([]float32, s.NumActuators())
	for k := range cmd {
		cmd[k] = float32(1e-7 * s.mirror.Positions()[k][0])
	}
	slopes := make([]float32, s.NumSlopes())
	s.SetCommand(cmd)
	s.Frame(slopes)
	if mx, _ := meanSlopes(slopes); math.Abs(mx) < 1e-9 {
		t.Fatalf("a tilted mirror gives a mean x slope of %.3g rad on the beacon: its tilt must be seen", mx)
	}
}

// The science camera's offset and the beacon leave the natural-star, on-axis
// bench on its single line of sight (the sensor's OPD is the science OPD).
func TestSingleLineOfSightUnchanged(t *testing.T) {
	for _, name := range []string{"default", "small"} {
		t.Run(name, func(t *testing.T) {
			s := newSystem(t, load(t, name))
			s.Advance()
			if &s.SensorAtmosphere()[0] != &s.Atmosphere()[0] {
				t.Fatalf("%s: the sensor looks along its own view though the scenario has one line of sight", name)
			}
		})
	}
}

func TestLGSFrameAllocatesNothing(t *testing.T) {
	s := newSystem(t, load(t, "lgs"))
	slopes := make([]float32, s.NumSlopes())
	s.Frame(slopes)
	if n := testing.AllocsPerRun(5, func() { s.Frame(slopes); _ = s.ResidualRMSNoTilt() }); n != 0 {
		t.Fatalf("an lgs frame allocates %v", n)
	}
}

// An offset science camera sees the layers shifted by θ·h while the sensor stays
// on the natural star: the bench's two OPDs differ by the anisoplanatism, of the
// size Fried's θ0 gives (Fried 1982, J. Opt. Soc. Am. 72, 52: σ² = (θ/θ0)^(5/3),
// θ0 = 0.314 r0 cos z / h̄; von Kármán turbulence with L0 30 m stays below it).
func TestOffAxisScienceSeesAnisoplanatism(t *testing.T) {
	s := *load(t, "lgs")
	s.LaserGuideStar = nil
	s.Science.OffsetX = 10
	sys := newSystem(t, &s)
	sys.SetNoise(false)
	hbar := 0.0
	for _, l := range s.Atmosphere.Layers {
		hbar += l.Fraction * math.Pow(l.Altitude, 5.0/3)
	}
	hbar = math.Pow(hbar, 3.0/5)
	theta0 := 0.314 * s.Atmosphere.R0 / hbar
	want := math.Pow(10/206265.0/theta0, 5.0/3)
	k := 2 * math.Pi / 500e-9
	var got float64
	const frames = 20
	slopes := make([]float32, sys.NumSlopes())
	for f := 0; f < frames; f++ {
		sys.Frame(slopes)
		sci, sens := sys.Atmosphere(), sys.SensorAtmosphere()
		var s2, w float64
		for i, m := range sys.pupil.Mask {
			if m != 0 {
				d := (sci[i] - sens[i]) * k
				s2 += d * d
				w++
			}
		}
		got += s2 / w / frames
	}
	t.Logf("10 arcsec off axis: science − sensor %.2f rad² at 500 nm; Kolmogorov (θ/θ0)^(5/3) = %.2f rad²", got, want)
	if !(got > 0.3*want && got < want) {
		t.Fatalf("off-axis σ² %.2f rad², want between 0.3 and 1 times Fried's %.2f rad² (von Kármán, L0 30 m)", got, want)
	}
}
