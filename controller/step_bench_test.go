package controller

import (
	"fmt"
	"math"
	"math/rand/v2"
	"testing"
	"time"

	"gonum.org/v1/gonum/mat"
)

// benchGeometry returns the slope and actuator counts of an n×n Shack–Hartmann
// with a Fried-geometry mirror on a circular pupil: about π/4 of the n² subapertures
// are valid, two slopes each, and π/4 of the (n+1)² actuators (*common practice*).
func benchGeometry(n int) (slopes, actuators int) {
	valid := int(math.Round(math.Pi / 4 * float64(n*n)))
	return 2 * valid, int(math.Round(math.Pi / 4 * float64((n+1)*(n+1))))
}

func BenchmarkStep(b *testing.B) {
	for _, n := range []int{8, 24, 40, 64} {
		ns, na := benchGeometry(n)
		b.Run(fmt.Sprintf("%dx%d", n, n), func(b *testing.B) {
			rng := rand.New(rand.NewPCG(uint64(n), 1))
			data := make([]float64, na*ns)
			for i := range data {
				data[i] = rng.Float64() - 0.5
			}
			r, err := ReconstructorFromMatrix(mat.NewDense(na, ns, data), time.Time{})
			if err != nil {
				b.Fatal(err)
			}
			p, err := NewParams(ParamsConfig{Reconstructor: r, Gain: 0.4, Leak: 0.01, Stroke: 1, StrehlWavelength: 1.65e-6})
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
			b.ReportMetric(float64(ns), "slopes")
			b.ReportMetric(float64(na), "actuators")
		})
	}
}
