package bench

import (
	"encoding/binary"
	"math"
	"testing"

	stillskyv1 "stillsky/proto/stillsky/v1"
	"stillsky/sim/scenario"
)

// TestPixelCameraElongatesBeaconSpots renders a noise-free frame of the lgs
// scenario in pixel mode with every spot centred, and checks the spot of the
// valid subaperture farthest from the launch point: its variance along the
// line to the launch point exceeds the one across by L²/12, the variance of a
// uniform line of length L (the detector's model; L from BeaconElongation,
// ≈ Δh·r/H², common practice), within 5 %; the calibration source's spot is
// round.
func TestPixelCameraElongatesBeaconSpots(t *testing.T) {
	s, err := scenario.Load("lgs")
	if err != nil {
		t.Fatal(err)
	}
	s.WFS.Noise = false
	p := 40 // wide enough for the spot and its line, cut by the window only in its far tails
	s.WFS.Pixels = &scenario.Pixels{PixelsPerSubaperture: p, PixelScale: s.GuideStar.Wavelength / (2 * s.SubapertureSize()),
		Bias: 100, FullWell: 1e6, Gain: 16, FlatSeed: 1, Centroid: scenario.CentroidCoG}
	s.GuideStar.Magnitude = 2
	sys, err := NewSystem(s)
	if err != nil {
		t.Fatal(err)
	}
	c, err := newPixelCamera(s, sys)
	if err != nil {
		t.Fatal(err)
	}
	n := s.WFS.Subapertures
	var valid []int
	for i, v := range sys.Sensor().Valid() {
		if v {
			valid = append(valid, i)
		}
	}
	d, half, g := s.SubapertureSize(), s.Telescope.Diameter/2, s.LaserGuideStar
	far, farR := 0, -1.0
	var farX, farY float64
	for _, v := range valid {
		x, y := (float64(v%n)+0.5)*d-half-g.LaunchX, (float64(v/n)+0.5)*d-half-g.LaunchY
		if r := math.Hypot(x, y); r > farR {
			far, farR, farX, farY = v, r, x, y
		}
	}
	e, err := BeaconElongation(s, [][2]float64{{farX + g.LaunchX, farY + g.LaunchY}}, s.WFS.Pixels.PixelScale)
	if err != nil {
		t.Fatal(err)
	}
	L := e[0].Length
	if L < 1 {
		t.Fatalf("elongation %.2f pixels: too short to test", L)
	}
	ux, uy := farX/farR, farY/farR
	moments := func(cal bool) (along, across float64) {
		buf := make([]byte, c.bytes())
		src := stillskyv1.Source_SOURCE_SKY
		if cal {
			src = stillskyv1.Source_SOURCE_CALIBRATION
		}
		c.source.Store(int32(src))
		c.render(buf, make([]float32, 2*len(valid)))
		r0, c0 := (far/n)*p, (far%n)*p
		var sw, sa, sc float64
		mid := float64(p-1) / 2
		for y := 0; y < p; y++ {
			for x := 0; x < p; x++ {
				i := (r0+y)*c.side + c0 + x
				w := float64(binary.LittleEndian.Uint16(buf[2*i:])) - 100
				dx, dy := float64(x)-mid, float64(y)-mid
				a, b := dx*ux+dy*uy, -dx*uy+dy*ux
				sw += w
				sa += w * a * a
				sc += w * b * b
			}
		}
		return sa / sw, sc / sw
	}
	along, across := moments(false)
	t.Logf("subaperture %d, %.2f m from the launch point: elongation %.2f px, variance along %.3f across %.3f px²", far, farR, L, along, across)
	if got, want := along-across, L*L/12; math.Abs(got-want) > 0.05*want {
		t.Errorf("along − across = %.3f px², want L²/12 = %.3f within 5%%", got, want)
	}
	if along, across := moments(true); math.Abs(along-across) > 0.01*across {
		t.Errorf("calibration source: along %.3f, across %.3f px²: want a round spot", along, across)
	}
}
