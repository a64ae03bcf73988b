package detector

import (
	"errors"
	"math"
	"math/rand/v2"
	"strings"
	"testing"

	"gonum.org/v1/gonum/stat"
)

func good() Config {
	return Config{Subapertures: 2, Valid: []int{0, 1, 3}, Pixels: 6, Sigma: 1, Photons: 100,
		Gain: 1, FullWell: 1000, Bias: 50}
}

// Every out-of-range field is refused with its name.
func TestConfigRefusals(t *testing.T) {
	for _, tc := range []struct {
		field string
		edit  func(*Config)
	}{
		{"Subapertures", func(c *Config) { c.Subapertures = 0 }},
		{"Pixels", func(c *Config) { c.Pixels = 1 }},
		{"Pixels", func(c *Config) { c.Pixels = 65 }},
		{"Sigma", func(c *Config) { c.Sigma = math.NaN() }},
		{"Sigma", func(c *Config) { c.Sigma = 0.1 }},
		{"Photons", func(c *Config) { c.Photons = -1 }},
		{"Background", func(c *Config) { c.Background = math.Inf(1) }},
		{"Dark", func(c *Config) { c.Dark = -0.1 }},
		{"ReadNoise", func(c *Config) { c.ReadNoise = -1 }},
		{"Bias", func(c *Config) { c.Bias = 70000 }},
		{"Gain", func(c *Config) { c.Gain = 0 }},
		{"FullWell", func(c *Config) { c.FullWell = 0 }},
		{"FlatRMS", func(c *Config) { c.FlatRMS = 0.5 }},
		{"Valid", func(c *Config) { c.Valid = nil }},
		{"Valid[1]", func(c *Config) { c.Valid = []int{0, 4} }},
		{"Valid[1]", func(c *Config) { c.Valid = []int{2, 2} }},
	} {
		t.Run(tc.field, func(t *testing.T) {
			c := good()
			tc.edit(&c)
			_, err := New(c)
			if !errors.Is(err, ErrConfig) || !strings.Contains(err.Error(), tc.field+" =") {
				t.Errorf("err = %v, want ErrConfig naming %s", err, tc.field)
			}
		})
	}
	if _, err := New(good()); err != nil {
		t.Fatal(err)
	}
}

// The expected counts: a spot's window sums to the photons (less the wings
// beyond the window, erf(3/√2)² = 0.9946 for a 6-pixel window and σ = 1),
// invalid windows read bias plus dark and background, and a pixel clips at
// full well. With photon noise the mean and variance of a dark pixel are both
// its mean count (Poisson).
func TestRenderCounts(t *testing.T) {
	c := good()
	c.Dark, c.Background = 3, 2
	d, err := New(c)
	if err != nil {
		t.Fatal(err)
	}
	side := d.Side()
	frame := make([]uint16, side*side)
	if err := d.Render(frame, make([]float64, 6), nil); err != nil {
		t.Fatal(err)
	}
	sum := 0.0
	for y := range 6 {
		for x := range 6 {
			sum += float64(frame[y*side+x]) - 55
		}
	}
	if want := 100 * math.Pow(math.Erf(3/math.Sqrt2), 2); math.Abs(sum-want) > 36*0.5+0.5 {
		t.Errorf("window sum %.1f, want %.1f within rounding", sum, want)
	}
	if v := frame[6*side+0]; v != 55 { // subaperture 2 (row 1, column 0) is invalid
		t.Errorf("invalid window pixel %d, want 55 (bias 50 + dark 3 + background 2)", v)
	}
	c.Photons = 1e6
	d, _ = New(c)
	if err := d.Render(frame, make([]float64, 6), nil); err != nil {
		t.Fatal(err)
	}
	if v := frame[2*side+2]; v != 1050 {
		t.Errorf("clipped pixel %d, want 1050 (full well 1000 + bias 50)", v)
	}
	c.Photons, c.PhotonNoise, c.Dark, c.Background = 0, true, 12, 8
	d, _ = New(c)
	rng := rand.New(rand.NewPCG(3, 4))
	var xs []float64
	for range 400 {
		if err := d.Render(frame, make([]float64, 6), rng); err != nil {
			t.Fatal(err)
		}
		for _, v := range frame {
			xs = append(xs, float64(v)-50)
		}
	}
	m, v := stat.MeanVariance(xs, nil)
	if math.Abs(m-20) > 0.1 || math.Abs(v-20)/20 > 0.05 {
		t.Errorf("dark pixels: mean %.3f variance %.3f, want 20 and 20 (Poisson)", m, v)
	}
	if err := d.Render(frame[1:], make([]float64, 6), rng); !errors.Is(err, ErrConfig) {
		t.Errorf("short frame: %v, want ErrConfig", err)
	}
	if err := d.Render(frame, make([]float64, 5), rng); !errors.Is(err, ErrConfig) {
		t.Errorf("short offsets: %v, want ErrConfig", err)
	}
}
