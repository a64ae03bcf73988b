package controller

import (
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// BenchmarkStepModalBasis runs Loop.Step with a reconstructor built in the
// singular modes of M ("svd") and one built in KL modes ("kl") with modal
// gains not 1, on a 25-across mirror: the gains fold into the control matrix,
// so both are the same dense multiply.
func BenchmarkStepModalBasis(b *testing.B) {
	const across, d = 25, 1.0
	pitch := d / (across - 1)
	var pos [][2]float64
	for iy := range across {
		for ix := range across {
			x, y := -d/2+float64(ix)*pitch, -d/2+float64(iy)*pitch
			if math.Hypot(x, y) <= d/2+0.5*pitch {
				pos = append(pos, [2]float64{x, y})
			}
		}
	}
	na := len(pos)
	ns := 2 * na
	rng := rand.New(rand.NewPCG(3, 4))
	m := randomDense(rng, ns, na)
	kl, _, err := KLBasis(KLConfig{Positions: pos, Pitch: pitch, Coupling: 0.15, Diameter: d})
	if err != nil {
		b.Fatal(err)
	}
	for _, c := range []struct {
		name string
		cfg  ReconstructorConfig
	}{
		{"svd", ReconstructorConfig{}},
		{"kl", ReconstructorConfig{Basis: mat.DenseCopyOf(kl.Slice(0, na, 0, na-1)), BasisName: "kl", MaxCondition: 100}},
	} {
		b.Run(c.name, func(b *testing.B) {
			r, err := BuildReconstructor(m, c.cfg)
			if err != nil {
				b.Fatal(err)
			}
			gains := make([]float64, r.NumModes())
			for i := range gains {
				gains[i] = 0.5 + 0.5*float64(i)/float64(len(gains))
			}
			p, err := NewParams(ParamsConfig{Reconstructor: r, Gain: 0.4, Leak: 0.01, Stroke: 1, StrehlWavelength: 1.65e-6, ModalGains: gains})
			if err != nil {
				b.Fatal(err)
			}
			defer p.Close()
			l, err := NewLoop(p)
			if err != nil {
				b.Fatal(err)
			}
			s, cmd := randomSlopes(rng, ns), make([]float32, na)
			b.ReportAllocs()
			b.ResetTimer()
			for b.Loop() {
				l.Step(s, cmd)
			}
		})
	}
}
