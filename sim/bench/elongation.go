package bench

import (
	"fmt"
	"math"

	"stillsky/sim/detector"
	"stillsky/sim/scenario"
)

// BeaconElongation returns, for subapertures centred at centres (metres in the
// pupil plane from the pupil's centre), the elongation of the laser beacon's spot
// seen from each: the sodium layer, thickness Δh about height H, lies along the
// launch beam, and a subaperture at distance r from the launch point sees its
// bottom and top at angles atan(r/(H − Δh/2)) and atan(r/(H + Δh/2)) from the
// beam, a line of that angular length (≈ Δh·r/H², common practice) pointing away
// from the launch point. Lengths are in pixels of pixelScale radians, for
// detector.Detector.SetElongation; heights along the line of sight (sec z).
// It returns an error for a scenario without a laser_guide_star section.
func BeaconElongation(s *scenario.Scenario, centres [][2]float64, pixelScale float64) ([]detector.Elongation, error) {
	g := s.LaserGuideStar
	if g == nil {
		return nil, fmt.Errorf("bench: scenario %s: no laser_guide_star section, no elongation", s.Name)
	}
	if !(pixelScale > 0) {
		return nil, fmt.Errorf("bench: pixel scale %g rad: must be positive", pixelScale)
	}
	sec := 1 / math.Cos(s.Atmosphere.ZenithDeg*math.Pi/180)
	lo, hi := (g.Height-g.Thickness/2)*sec, (g.Height+g.Thickness/2)*sec
	out := make([]detector.Elongation, len(centres))
	for i, c := range centres {
		dx, dy := c[0]-g.LaunchX, c[1]-g.LaunchY
		r := math.Hypot(dx, dy)
		out[i] = detector.Elongation{Length: (math.Atan(r/lo) - math.Atan(r/hi)) / pixelScale, Angle: math.Atan2(dy, dx)}
	}
	return out, nil
}
