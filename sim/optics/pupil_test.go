package optics

import (
	"math"
	"testing"
)

// The sampled clear area converges to π(D/2)²(1 − ε²) (geometry).
func TestPupilArea(t *testing.T) {
	p, err := NewPupil(PupilConfig{Diameter: 8, Obstruction: 0.14, N: 256})
	if err != nil {
		t.Fatal(err)
	}
	want := math.Pi / 4 * 256 * 256 * (1 - 0.14*0.14)
	if d := math.Abs(p.Area-want) / want; d > 0.005 {
		t.Fatalf("area %g samples, want %g (rel. error %.4f)", p.Area, want, d)
	}
}

func TestPupilRejectsBadConfig(t *testing.T) {
	for _, c := range []PupilConfig{
		{Diameter: 0, N: 64},
		{Diameter: math.NaN(), N: 64},
		{Diameter: 1, Obstruction: 1, N: 64},
		{Diameter: 1, N: 2},
		{Diameter: 1, Spiders: -1, N: 64},
		{Diameter: 1, SpiderWidth: 2, N: 64},
	} {
		if _, err := NewPupil(c); err == nil {
			t.Errorf("NewPupil(%+v) accepted a bad configuration", c)
		}
	}
}
