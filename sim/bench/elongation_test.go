package bench

import (
	"math"
	"testing"

	"stillsky/sim/detector"
)

// The spot elongation of the lgs scenario against the geometric formula
// Δh·r/H² (common practice), for subapertures at the launch point, at the edge
// of the pupil and off to the side of a launch telescope at the edge; the
// direction points away from the launch point.
func TestBeaconElongationGeometry(t *testing.T) {
	s := load(t, "lgs")
	g := *s.LaserGuideStar
	const scale = 1e-6 // rad per pixel
	for _, launch := range [][2]float64{{0, 0}, {4.5, 0}} {
		sc := *s
		gg := g
		gg.LaunchX, gg.LaunchY = launch[0], launch[1]
		sc.LaserGuideStar = &gg
		centres := [][2]float64{{launch[0], launch[1]}, {-4, 0}, {0, 3}, {2.5, -2.5}}
		e, err := BeaconElongation(&sc, centres, scale)
		if err != nil {
			t.Fatal(err)
		}
		for i, c := range centres {
			dx, dy := c[0]-launch[0], c[1]-launch[1]
			r := math.Hypot(dx, dy)
			want := g.Thickness * r / (g.Height * g.Height) / scale
			if math.Abs(e[i].Length-want) > 0.01*want+1e-12 {
				t.Errorf("launch %v, subaperture at %v: elongation %.4g px, Δh·r/H² = %.4g px", launch, c, e[i].Length, want)
			}
			if r > 0 && math.Abs(math.Remainder(e[i].Angle-math.Atan2(dy, dx), 2*math.Pi)) > 1e-12 {
				t.Errorf("launch %v, subaperture at %v: direction %.3f rad, want %.3f (away from the launch point)", launch, c, e[i].Angle, math.Atan2(dy, dx))
			}
		}
	}
	ngs := *s
	ngs.LaserGuideStar = nil
	if _, err := BeaconElongation(&ngs, [][2]float64{{0, 0}}, scale); err == nil {
		t.Fatal("elongation of a natural star accepted")
	}
}

// The elongations drive the pixel renderer: each spot's second moment along the
// direction away from the launch point grows by L²/12 (a uniform line of length
// L convolved with the Gaussian; the variance of a uniform distribution) and
// stays σ² across it; integrating over square pixels adds 1/12 px² to both (the
// variance of a unit box).
func TestBeaconElongationRendered(t *testing.T) {
	s := load(t, "lgs")
	g := *s.LaserGuideStar
	g.LaunchX = 4.5 // a side launch, for elongations of several pixels
	s.LaserGuideStar = &g
	centres := [][2]float64{{-2, -2}, {2, -2}, {-2, 2}, {2, 2}}
	const scale, sigma, p = 1.5e-6, 1.0, 24
	e, err := BeaconElongation(s, centres, scale)
	if err != nil {
		t.Fatal(err)
	}
	d, err := detector.New(detector.Config{Subapertures: 2, Valid: []int{0, 1, 2, 3}, Pixels: p, Sigma: sigma,
		Photons: 1e5, Gain: 1, FullWell: 1e9}) // peak below 65535 ADU, no clipping
	if err != nil {
		t.Fatal(err)
	}
	if err := d.SetElongation(e); err != nil {
		t.Fatal(err)
	}
	frame := make([]uint16, d.Side()*d.Side())
	if err := d.Render(frame, make([]float64, 8), nil); err != nil {
		t.Fatal(err)
	}
	for k := range centres {
		r0, c0 := (k/2)*p, (k%2)*p
		var w, mx, my float64
		for y := 0; y < p; y++ {
			for x := 0; x < p; x++ {
				v := float64(frame[(r0+y)*d.Side()+c0+x])
				w += v
				mx += v * float64(x)
				my += v * float64(y)
			}
		}
		mx, my = mx/w, my/w
		ca, sa := math.Cos(e[k].Angle), math.Sin(e[k].Angle)
		var along, across float64
		for y := 0; y < p; y++ {
			for x := 0; x < p; x++ {
				v := float64(frame[(r0+y)*d.Side()+c0+x])
				u := (float64(x)-mx)*ca + (float64(y)-my)*sa
				q := -(float64(x)-mx)*sa + (float64(y)-my)*ca
				along += v * u * u / w
				across += v * q * q / w
			}
		}
		L := e[k].Length
		along -= 1.0 / 12
		across -= 1.0 / 12
		t.Logf("subaperture %d: elongation %.2f px at %.2f rad; variance along %.3f (σ² + L²/12 = %.3f), across %.3f", k, L, e[k].Angle, along, sigma*sigma+L*L/12, across)
		if math.Abs((along-sigma*sigma)/(L*L/12)-1) > 0.1 {
			t.Errorf("subaperture %d: variance along the elongation %.3f px², want σ² + L²/12 = %.3f ± 10%% of L²/12", k, along, sigma*sigma+L*L/12)
		}
		if math.Abs(across-sigma*sigma) > 0.02 {
			t.Errorf("subaperture %d: variance across %.3f px², want σ² = %.3f", k, across, sigma*sigma)
		}
	}
}
