package controller

import (
	"bytes"
	"errors"
	"math"
	"math/rand/v2"
	"os/exec"
	"path/filepath"
	"testing"
	"time"

	"gonum.org/v1/gonum/mat"

	"stillsky/internal/fits"
	"stillsky/internal/testtool"
)

func sampleReconstructors(t *testing.T) map[string]*Reconstructor {
	t.Helper()
	rng := rand.New(rand.NewPCG(41, 42))
	m := randomDense(rng, 24, 10)
	created := time.Date(2026, 3, 14, 1, 59, 26, 535897932, time.UTC)
	svd, err := BuildReconstructor(m, ReconstructorConfig{ModesKept: 6, Created: created})
	if err != nil {
		t.Fatal(err)
	}
	tik, err := BuildReconstructor(m, ReconstructorConfig{Method: MethodTikhonov, Regularization: 0.1, Created: created})
	if err != nil {
		t.Fatal(err)
	}
	tik.Interaction = nil
	zonal, err := ReconstructorFromMatrix(randomDense(rng, 10, 24), time.Time{})
	if err != nil {
		t.Fatal(err)
	}
	return map[string]*Reconstructor{"svd": svd, "tikhonov": tik, "matrix": zonal}
}

func sameDense(a, b *mat.Dense) bool {
	if a == nil || b == nil {
		return a == nil && b == nil
	}
	return mat.Equal(a, b)
}

func TestReconstructorRoundTrip(t *testing.T) {
	for name, r := range sampleReconstructors(t) {
		t.Run(name, func(t *testing.T) {
			path := filepath.Join(t.TempDir(), "r.fits")
			if err := SaveReconstructor(path, r); err != nil {
				t.Fatal(err)
			}
			got, err := LoadReconstructor(path)
			if err != nil {
				t.Fatal(err)
			}
			if got.Method != r.Method || got.Slopes != r.Slopes || got.Actuators != r.Actuators ||
				got.ModesKept != r.ModesKept || got.Unseen != r.Unseen || !got.Created.Equal(r.Created) {
				t.Errorf("metadata %v %d×%d kept %d unseen %d %v, want %v %d×%d kept %d unseen %d %v",
					got.Method, got.Slopes, got.Actuators, got.ModesKept, got.Unseen, got.Created,
					r.Method, r.Slopes, r.Actuators, r.ModesKept, r.Unseen, r.Created)
			}
			for field, pair := range map[string][2]*mat.Dense{
				"control": {got.Control, r.Control}, "modes": {got.Modes, r.Modes},
				"inverse": {got.Inverse, r.Inverse}, "interaction": {got.Interaction, r.Interaction},
			} {
				if !sameDense(pair[0], pair[1]) {
					t.Errorf("%s differs after the round trip", field)
				}
			}
			if len(got.SingularValues) != len(r.SingularValues) {
				t.Fatalf("%d singular values, want %d", len(got.SingularValues), len(r.SingularValues))
			}
			for i, s := range r.SingularValues {
				if got.SingularValues[i] != s {
					t.Errorf("singular value %d: %g, want %g", i, got.SingularValues[i], s)
				}
			}
		})
	}
}

// fitsverify (HEASARC, Debian package fitsverify) checks the written file against
// the FITS Standard; we want neither errors nor warnings.
func TestReconstructorFitsverify(t *testing.T) {
	bin := testtool.Require(t, "fitsverify", "fitsverify")
	path := filepath.Join(t.TempDir(), "r.fits")
	if err := SaveReconstructor(path, sampleReconstructors(t)["svd"]); err != nil {
		t.Fatal(err)
	}
	out, err := exec.Command(bin, path).CombinedOutput()
	if err != nil {
		t.Fatalf("fitsverify: %v\n%s", err, out)
	}
	if !bytes.Contains(out, []byte("found 0 warning(s) and 0 error(s)")) {
		t.Errorf("fitsverify did not pass cleanly:\n%s", out)
	}
}

func TestReadReconstructorRejects(t *testing.T) {
	r := sampleReconstructors(t)["svd"]
	var buf bytes.Buffer
	if err := WriteReconstructor(&buf, r); err != nil {
		t.Fatal(err)
	}
	good := buf.Bytes()
	// Truncated or corrupt bytes: refused by the FITS reader.
	for _, n := range []int{0, 100, 2880, len(good) / 2, len(good) - 1} {
		if _, err := ReadReconstructor(bytes.NewReader(good[:n])); err == nil {
			t.Errorf("file truncated to %d of %d bytes accepted", n, len(good))
		}
	}
	// Well-formed FITS with bad content: refused by validation.
	edits := []struct {
		name string
		edit func([]*fits.HDU) []*fits.HDU
	}{
		{"no NSLOPES", func(h []*fits.HDU) []*fits.HDU { h[0].Header.Set("NSLOPES", "24", ""); return h }},
		{"NSLOPES wrong", func(h []*fits.HDU) []*fits.HDU { h[0].Header.Set("NSLOPES", 25, ""); return h }},
		{"NACTU zero", func(h []*fits.HDU) []*fits.HDU { h[0].Header.Set("NACTU", 0, ""); return h }},
		{"method unknown", func(h []*fits.HDU) []*fits.HDU { h[0].Header.Set("METHOD", "guess", ""); return h }},
		{"bad DATE", func(h []*fits.HDU) []*fits.HDU { h[0].Header.Set("DATE", "yesterday", ""); return h }},
		{"NaN in control", func(h []*fits.HDU) []*fits.HDU { h[0].Data.([]float64)[5] = math.NaN(); return h }},
		{"Inf in modes", func(h []*fits.HDU) []*fits.HDU { h[2].Data.([]float64)[0] = math.Inf(1); return h }},
		{"control not -modes·inverse", func(h []*fits.HDU) []*fits.HDU { h[0].Data.([]float64)[7] += 1; return h }},
		{"float32 control", func(h []*fits.HDU) []*fits.HDU {
			d := h[0].Data.([]float64)
			f := make([]float32, len(d))
			h[0].Bitpix, h[0].Data = -32, f
			return h
		}},
		{"modes shape", func(h []*fits.HDU) []*fits.HDU { h[2].Axes = []int{h[2].Axes[1], h[2].Axes[0]}; return h }},
		{"missing inverse", func(h []*fits.HDU) []*fits.HDU { return h[:3] }},
		{"missing modes and inverse", func(h []*fits.HDU) []*fits.HDU { return h[:2] }},
		{"unknown extension", func(h []*fits.HDU) []*fits.HDU { h[1].Header.Set("EXTNAME", "EXTRA", ""); return h }},
		{"duplicate extension", func(h []*fits.HDU) []*fits.HDU { return append(h, h[1]) }},
		{"singular values rising", func(h []*fits.HDU) []*fits.HDU { h[1].Data.([]float64)[3] = 1e9; return h }},
		{"modes kept too many", func(h []*fits.HDU) []*fits.HDU { h[0].Header.Set("MODESKPT", 99, ""); return h }},
	}
	for _, c := range edits {
		t.Run(c.name, func(t *testing.T) {
			hdus, err := fits.Read(bytes.NewReader(good))
			if err != nil {
				t.Fatal(err)
			}
			var out bytes.Buffer
			if err := fits.Write(&out, c.edit(hdus)...); err != nil {
				t.Fatal(err)
			}
			_, err = ReadReconstructor(&out)
			if !errors.Is(err, ErrReconstructorFile) {
				t.Fatalf("error %v, want ErrReconstructorFile", err)
			}
			t.Log(err)
		})
	}
}
