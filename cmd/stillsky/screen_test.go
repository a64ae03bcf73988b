package main

import (
	"bytes"
	"math"
	"os/exec"
	"path/filepath"
	"testing"

	"stillsky/internal/fits"
	"stillsky/internal/testtool"
	"stillsky/sim/scenario"
)

// End to end: the command writes a float32 cube whose keywords describe it, and whose
// screens have the Kolmogorov structure function of the R0 it records,
// D(r) = 6.88 (r/r0)^(5/3) (Fried 1966), within 10% at 2 and 4 samples (L0 made very
// large so that the von Kármán correction is below 1%).
func TestScreenCommand(t *testing.T) {
	const size, count, layer = 128, 6, 2
	path := filepath.Join(t.TempDir(), "screens.fits")
	err := runScreen([]string{"--scenario", "default", "--layer", "2", "--L0", "1e6", "--size", "128",
		"--count", "6", "--seed", "3", "--out", path})
	if err != nil {
		t.Fatal(err)
	}
	s, err := scenario.Load("default")
	if err != nil {
		t.Fatal(err)
	}
	hdus, err := fits.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	h := hdus[0]
	if h.Bitpix != -32 || len(h.Axes) != 3 || h.Axes[0] != size || h.Axes[1] != size || h.Axes[2] != count {
		t.Fatalf("BITPIX %d axes %v, want -32 [%d %d %d]", h.Bitpix, h.Axes, size, size, count)
	}
	// Roddier 1981: r0 ∝ (cos z)^(3/5); a layer holding the fraction f of Cn² has
	// r0·f^(−3/5).
	a := s.Atmosphere
	wantR0 := a.R0 * math.Pow(math.Cos(a.ZenithDeg*math.Pi/180), 0.6) * math.Pow(a.Layers[layer-1].Fraction, -0.6)
	wantScale := s.Telescope.Diameter / float64(s.Telescope.PupilSamples)
	for key, want := range map[string]float64{"R0": wantR0, "PIXSCALE": wantScale, "L0": 1e6, "WAVELEN": 5e-7} {
		if got, ok := h.Header.Float(key); !ok || math.Abs(got-want) > 1e-12*want {
			t.Errorf("%s = %v (%v), want %g", key, got, ok, want)
		}
	}
	if u, _ := h.Header.String("BUNIT"); u != "rad" {
		t.Errorf("BUNIT = %q, want rad", u)
	}
	if v, _ := h.Header.Int("SEED"); v != 3 {
		t.Errorf("SEED = %d, want 3", v)
	}
	if v, _ := h.Header.Int("LAYER"); v != layer {
		t.Errorf("LAYER = %d, want %d", v, layer)
	}
	data := h.Data.([]float32)
	for _, r := range []int{2, 4} {
		var sum float64
		var pairs int
		for k := 0; k < count; k++ {
			sc := data[k*size*size : (k+1)*size*size]
			for y := 0; y < size; y++ {
				for x := 0; x+r < size; x++ {
					dx := float64(sc[y*size+x+r] - sc[y*size+x])
					dy := float64(sc[(x+r)*size+y] - sc[x*size+y])
					sum += dx*dx + dy*dy
					pairs += 2
				}
			}
		}
		got := sum / float64(pairs)
		want := 6.88 * math.Pow(float64(r)*wantScale/wantR0, 5.0/3)
		if math.Abs(got/want-1) > 0.10 {
			t.Errorf("D(%d samples) = %.4g rad², want %.4g within 10%%", r, got, want)
		}
	}
}

// The cube passes fitsverify (HEASARC; Debian package fitsverify) without errors or
// warnings.
func TestScreenFileVerifies(t *testing.T) {
	bin := testtool.Require(t, "fitsverify", "fitsverify")
	path := filepath.Join(t.TempDir(), "cube.fits")
	if err := runScreen([]string{"--size", "32", "--count", "3", "--out", path}); err != nil {
		t.Fatal(err)
	}
	out, err := exec.Command(bin, path).CombinedOutput()
	if err != nil || !bytes.Contains(out, []byte("found 0 warning(s) and 0 error(s)")) {
		t.Errorf("fitsverify: %v\n%s", err, out)
	}
}

// One screen is written as a plain image.
func TestScreenSingleImage(t *testing.T) {
	path := filepath.Join(t.TempDir(), "one.fits")
	if err := runScreen([]string{"--size", "64", "--out", path}); err != nil {
		t.Fatal(err)
	}
	hdus, err := fits.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	if a := hdus[0].Axes; len(a) != 2 || a[0] != 64 || a[1] != 64 {
		t.Errorf("axes %v, want [64 64]", a)
	}
}

func TestScreenBadFlags(t *testing.T) {
	out := filepath.Join(t.TempDir(), "x.fits")
	for _, args := range [][]string{
		{},
		{"--out", out, "--count", "0"},
		{"--out", out, "--size", "1"},
		{"--out", out, "--layer", "9"},
		{"--out", out, "--layer", "-1"},
		{"--out", out, "--r0", "-0.1"},
		{"--out", out, "--L0", "0"},
		{"--out", out, "--pixel-scale", "0"},
		{"--out", out, "--scenario", "no-such-scenario"},
		{"--out", out, "--size", "16384", "--count", "100"},
		{"--out", out, "--bogus"},
		{"--out", out, "stray"},
		{"--out", filepath.Join(out, "missing-dir", "y.fits"), "--size", "8"},
	} {
		if err := runScreen(args); err == nil {
			t.Errorf("runScreen(%q) succeeded", args)
		}
	}
}
