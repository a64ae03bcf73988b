package analysis

import (
	"math/rand/v2"
	"testing"
)

// BenchmarkEstimate times one turbulence estimate on 2048 frames of a
// 24×24-subaperture sensor's coefficients (AR(1) series standing in for data).
func BenchmarkEstimate(b *testing.B) {
	g := SensorGeometry{Subapertures: 24, SubapertureSize: 0.15, PupilDiameter: 3.6, Wavelength: 7e-7}
	for i := range 24 * 24 {
		x, y := float64(i%24)-11.5, float64(i/24)-11.5
		if r := x*x + y*y; r < 144 && r > 4 {
			g.Valid = append(g.Valid, i)
		}
	}
	e, err := NewEstimator(g, EstimatorConfig{})
	if err != nil {
		b.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(1, 1))
	series := make([][]float64, 2048)
	prev := make([]float64, e.Modes())
	for k := range series {
		row := make([]float64, e.Modes())
		for j := range row {
			row[j] = 0.99*prev[j] + rng.NormFloat64()/float64(j+1)
		}
		series[k], prev = row, row
	}
	b.ResetTimer()
	for range b.N {
		if _, err := e.Estimate(series, 1000, 30); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkNewEstimator times building the estimator (the Zernike slope matrix
// and its pseudo-inverse) for a 24×24-subaperture sensor.
func BenchmarkNewEstimator(b *testing.B) {
	g := SensorGeometry{Subapertures: 24, SubapertureSize: 0.15, PupilDiameter: 3.6, Wavelength: 7e-7, Obstruction: 0.15}
	for i := range 24 * 24 {
		x, y := float64(i%24)-11.5, float64(i/24)-11.5
		if r := x*x + y*y; r < 144 && r > 4 {
			g.Valid = append(g.Valid, i)
		}
	}
	for range b.N {
		if _, err := NewEstimator(g, EstimatorConfig{}); err != nil {
			b.Fatal(err)
		}
	}
}
