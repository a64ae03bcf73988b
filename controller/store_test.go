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
	modal, err := BuildReconstructor(m, ReconstructorConfig{Basis: randomDense(rng, 10, 10), BasisName: "kl", ModesKept: 8, Created: created})
	if err != nil {
		t.Fatal(err)
	}
	return map[string]*Reconstructor{"svd": svd, "tikhonov": tik, "matrix": zonal, "modal basis": modal}
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
				got.ModesKept != r.ModesKept || got.Unseen != r.Unseen || !got.Created.Equal(r.Created) || got.Basis != r.Basis {
				t.Errorf("metadata %v %d×%d kept %d unseen %d %v basis %q, want %v %d×%d kept %d unseen %d %v basis %q",
					got.Method, got.Slopes, got.Actuators, got.ModesKept, got.Unseen, got.Created, got.Basis,
					r.Method, r.Slopes, r.Actuators, r.ModesKept, r.Unseen, r.Created, r.Basis)
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
	for _, p := range []string{path, "testdata/reconstructor-v1.fits"} {
		out, err := exec.Command(bin, p).CombinedOutput()
		if err != nil {
			t.Fatalf("fitsverify %s: %v\n%s", p, err, out)
		}
		if !bytes.Contains(out, []byte("found 0 warning(s) and 0 error(s)")) {
			t.Errorf("fitsverify did not pass cleanly on %s:\n%s", p, out)
		}
	}
}

// testdata/reconstructor-v1.fits was written by the version 1 writer (no FILEVERS;
// NSLOPES, NACTU and IMAT) from sampleReconstructors' svd entry. The reader still
// takes it, with the same content, and saving it again writes version 2.
func TestReadVersion1File(t *testing.T) {
	const path = "testdata/reconstructor-v1.fits"
	old, err := fits.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	h := &old[0].Header
	if _, present := h.Get("FILEVERS"); present {
		t.Fatalf("%s has FILEVERS: not a version 1 file", path)
	}
	if _, ok := h.Int("NACTU"); !ok {
		t.Fatalf("%s has no NACTU: not a version 1 file", path)
	}
	got, err := LoadReconstructor(path)
	if err != nil {
		t.Fatal(err)
	}
	want := sampleReconstructors(t)["svd"]
	if got.Method != want.Method || got.Slopes != want.Slopes || got.Actuators != want.Actuators ||
		got.ModesKept != want.ModesKept || got.Unseen != want.Unseen || !got.Created.Equal(want.Created) {
		t.Errorf("metadata %v %d×%d kept %d unseen %d %v, want %v %d×%d kept %d unseen %d %v",
			got.Method, got.Slopes, got.Actuators, got.ModesKept, got.Unseen, got.Created,
			want.Method, want.Slopes, want.Actuators, want.ModesKept, want.Unseen, want.Created)
	}
	// The file was written on one machine; the SVD here may differ in the last bits.
	for field, pair := range map[string][2]*mat.Dense{
		"control": {got.Control, want.Control}, "modes": {got.Modes, want.Modes},
		"inverse": {got.Inverse, want.Inverse}, "interaction": {got.Interaction, want.Interaction},
	} {
		if pair[0] == nil || !mat.EqualApprox(pair[0], pair[1], 1e-9) {
			t.Errorf("%s differs from the sample it was written from", field)
		}
	}
	var buf bytes.Buffer
	if err := WriteReconstructor(&buf, got); err != nil {
		t.Fatal(err)
	}
	hdus, err := fits.Read(&buf)
	if err != nil {
		t.Fatal(err)
	}
	if v, _ := hdus[0].Header.Int("FILEVERS"); v != 2 {
		t.Errorf("rewritten file: FILEVERS %d, want 2", v)
	}
	if n, _ := hdus[0].Header.Int("ACTCNT"); n != int64(want.Actuators) {
		t.Errorf("rewritten file: ACTCNT %d, want %d", n, want.Actuators)
	}
	if name, _ := hdus[len(hdus)-1].Header.String("EXTNAME"); name != "INTERACT" {
		t.Errorf("rewritten file: last extension %q, want INTERACT", name)
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
		{"no SLOPECNT", func(h []*fits.HDU) []*fits.HDU { h[0].Header.Set("SLOPECNT", "24", ""); return h }},
		{"SLOPECNT wrong", func(h []*fits.HDU) []*fits.HDU { h[0].Header.Set("SLOPECNT", 25, ""); return h }},
		{"ACTCNT zero", func(h []*fits.HDU) []*fits.HDU { h[0].Header.Set("ACTCNT", 0, ""); return h }},
		{"FILEVERS unknown", func(h []*fits.HDU) []*fits.HDU { h[0].Header.Set("FILEVERS", 3, ""); return h }},
		{"FILEVERS not an integer", func(h []*fits.HDU) []*fits.HDU { h[0].Header.Set("FILEVERS", "2", ""); return h }},
		{"version 2 with the version 1 counts", func(h []*fits.HDU) []*fits.HDU {
			h[0].Header.Set("NSLOPES", 24, "")
			h[0].Header.Set("SLOPECNT", "gone", "")
			return h
		}},
		{"version 2 with the version 1 interaction name", func(h []*fits.HDU) []*fits.HDU { h[4].Header.Set("EXTNAME", "IMAT", ""); return h }},
		{"version 1 with the version 2 names", func(h []*fits.HDU) []*fits.HDU { h[0].Header.Set("FILEVERS", 1, ""); return h }},
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
