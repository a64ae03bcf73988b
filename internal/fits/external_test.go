package fits

import (
	"bytes"
	"encoding/json"
	"fmt"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"

	"stillsky/internal/testtool"
)

// externalFile writes every BITPIX and axis count, one header full of keyword types,
// and returns the path.
func externalFile(t *testing.T) (string, []*HDU) {
	hdus := allSamples()
	hdus[0].Header = headerSample()
	path := filepath.Join(t.TempDir(), "all.fits")
	if err := WriteFile(path, hdus...); err != nil {
		t.Fatal(err)
	}
	return path, hdus
}

// fitsverify (HEASARC, Debian package fitsverify) checks conformance with the FITS
// Standard; we want neither errors nor warnings.
func TestFitsverify(t *testing.T) {
	bin := testtool.Require(t, "fitsverify", "fitsverify")
	hdus := allSamples()
	hdus[0].Header = headerSample()
	// An undefined value is legal (FITS Standard 4.0, §4.1.2.3) but fitsverify
	// warns about it, so this file leaves it out.
	hdus[0].Header.Cards = hdus[0].Header.Cards[:len(hdus[0].Header.Cards)-1]
	path := filepath.Join(t.TempDir(), "verify.fits")
	if err := WriteFile(path, hdus...); err != nil {
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

// python returns a Python interpreter that can import astropy.io.fits. The Debian
// interpreter comes first: another python3 on PATH may lack the Debian package.
func python(t *testing.T) string {
	for _, p := range []string{"/usr/bin/python3", "python3"} {
		if bin, err := exec.LookPath(p); err == nil {
			if exec.Command(bin, "-c", "import astropy.io.fits").Run() == nil {
				return bin
			}
		}
	}
	testtool.Missing(t, "python3 cannot import astropy (Debian package python3-astropy)")
	return ""
}

// dumpScript prints every HDU of a file as JSON after astropy's own strict check.
const dumpScript = `
import json, sys
from astropy.io import fits
from astropy.io.fits.card import Undefined
out = []
with fits.open(sys.argv[1]) as hdul:
    hdul.verify('exception')
    for h in hdul:
        cards = []
        for c in h.header.cards:
            v = c.value
            if isinstance(v, Undefined):
                v = None
            cards.append([c.keyword, v, c.comment])
        data = None if h.data is None else h.data.ravel().tolist()
        out.append({"bitpix": h.header["BITPIX"], "shape": list(h.data.shape) if h.data is not None else [], "data": data, "cards": cards})
json.dump(out, sys.stdout)
`

type astropyHDU struct {
	Bitpix int
	Shape  []int
	Data   []json.Number
	Cards  [][3]any
}

// astropy (Debian package python3-astropy) reads our files back with identical data
// and keywords.
func TestAstropyReadsOurFiles(t *testing.T) {
	py := python(t)
	path, want := externalFile(t)
	out, err := exec.Command(py, "-c", dumpScript, path).Output()
	if err != nil {
		t.Fatalf("astropy: %v\n%s", err, exitText(err))
	}
	dec := json.NewDecoder(bytes.NewReader(out))
	dec.UseNumber()
	var got []astropyHDU
	if err := dec.Decode(&got); err != nil {
		t.Fatal(err)
	}
	if len(got) != len(want) {
		t.Fatalf("astropy found %d HDUs, want %d", len(got), len(want))
	}
	for i, w := range want {
		g := got[i]
		if g.Bitpix != w.Bitpix {
			t.Errorf("HDU %d: astropy BITPIX %d, want %d", i, g.Bitpix, w.Bitpix)
		}
		for k := range w.Axes {
			if len(g.Shape) != len(w.Axes) || g.Shape[len(g.Shape)-1-k] != w.Axes[k] {
				t.Errorf("HDU %d: astropy shape %v, want reversed %v", i, g.Shape, w.Axes)
				break
			}
		}
		compareData(t, i, w, g.Data)
		compareCards(t, i, w.Header, g.Cards)
	}
}

func compareData(t *testing.T, i int, w *HDU, got []json.Number) {
	t.Helper()
	n, _ := dataLen(w.Data)
	if len(got) != n {
		t.Errorf("HDU %d: astropy read %d values, want %d", i, len(got), n)
		return
	}
	for k, num := range got {
		var same bool
		switch d := w.Data.(type) {
		case []float32:
			f, err := num.Float64()
			same = err == nil && float32(f) == d[k]
		case []float64:
			f, err := num.Float64()
			same = err == nil && f == d[k]
		case []int16:
			v, err := num.Int64()
			same = err == nil && v == int64(d[k])
		case []int32:
			v, err := num.Int64()
			same = err == nil && v == int64(d[k])
		}
		if !same {
			t.Errorf("HDU %d value %d: astropy read %s", i, k, num)
			return
		}
	}
}

func compareCards(t *testing.T, i int, want Header, got [][3]any) {
	t.Helper()
	var user [][3]any
	for _, c := range got {
		if !structural(c[0].(string)) {
			user = append(user, c)
		}
	}
	if len(user) != len(want.Cards) {
		t.Errorf("HDU %d: astropy found %d user cards, want %d: %v", i, len(user), len(want.Cards), user)
		return
	}
	for k, w := range want.Cards {
		g := user[k]
		key, comment := g[0].(string), g[2].(string)
		if commentary(w.Key) {
			// astropy keeps the text of a commentary card as its value.
			if key != w.Key || g[1] != w.Comment {
				t.Errorf("HDU %d: astropy card %v, want %s %q", i, g, w.Key, w.Comment)
			}
			continue
		}
		if key != w.Key || comment != w.Comment || !sameValue(w.Value, g[1]) {
			t.Errorf("HDU %d: astropy card %v, want %+v", i, g, w)
		}
	}
}

func sameValue(want, got any) bool {
	switch w := want.(type) {
	case nil:
		return got == nil
	case string:
		return got == w
	case bool:
		return got == w
	case int64:
		n, ok := got.(json.Number)
		if !ok || strings.ContainsAny(n.String(), ".eE") {
			return false
		}
		v, err := n.Int64()
		return err == nil && v == w
	case float64:
		n, ok := got.(json.Number)
		if !ok || !strings.ContainsAny(n.String(), ".eE") {
			return false
		}
		v, err := n.Float64()
		return err == nil && v == w
	}
	return false
}

// writeScript writes a file with astropy for our reader.
const writeScript = `
import sys
import numpy as np
from astropy.io import fits
p = fits.PrimaryHDU(np.arange(12, dtype='>f4').reshape(3, 4) * 0.5)
p.header['OBSERVER'] = ('nobody', 'who')
p.header['GAIN'] = 1.5
p.header['NFRAMES'] = 7
p.header['FLAG'] = True
p.header.add_comment('hello')
e1 = fits.ImageHDU((np.arange(24, dtype='>i2') - 12).reshape(2, 3, 4), name='SHORTS')
e2 = fits.ImageHDU(np.arange(5, dtype='>f8') / 3, name='DOUBLES')
e3 = fits.ImageHDU(np.arange(6, dtype='>i4') * -100000, name='INTS')
fits.HDUList([p, e1, e2, e3]).writeto(sys.argv[1])
`

// Our reader takes files written by astropy (Debian package python3-astropy).
func TestReadAstropyFiles(t *testing.T) {
	py := python(t)
	path := filepath.Join(t.TempDir(), "astropy.fits")
	if out, err := exec.Command(py, "-c", writeScript, path).CombinedOutput(); err != nil {
		t.Fatalf("astropy: %v\n%s", err, out)
	}
	hdus, err := ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	if len(hdus) != 4 {
		t.Fatalf("%d HDUs, want 4", len(hdus))
	}
	p := hdus[0]
	if s, _ := p.Header.String("OBSERVER"); s != "nobody" {
		t.Errorf("OBSERVER = %q", s)
	}
	if g, _ := p.Header.Float("GAIN"); g != 1.5 {
		t.Errorf("GAIN = %v", g)
	}
	if n, _ := p.Header.Int("NFRAMES"); n != 7 {
		t.Errorf("NFRAMES = %v", n)
	}
	if v, _ := p.Header.Get("FLAG"); v != true {
		t.Errorf("FLAG = %v", v)
	}
	if c := p.Header.Comments("COMMENT"); len(c) == 0 || c[len(c)-1] != "hello" {
		t.Errorf("COMMENT cards %q", c)
	}
	check := func(i, bitpix int, axes []int, name string, value func(k int) float64) {
		h := hdus[i]
		if h.Bitpix != bitpix || fmt.Sprint(h.Axes) != fmt.Sprint(axes) {
			t.Errorf("HDU %d: BITPIX %d axes %v, want %d %v", i, h.Bitpix, h.Axes, bitpix, axes)
			return
		}
		if name != "" {
			if s, _ := h.Header.String("EXTNAME"); s != name {
				t.Errorf("HDU %d: EXTNAME %q, want %q", i, s, name)
			}
		}
		n, _ := dataLen(h.Data)
		for k := 0; k < n; k++ {
			var v float64
			switch d := h.Data.(type) {
			case []float32:
				v = float64(d[k])
			case []float64:
				v = d[k]
			case []int16:
				v = float64(d[k])
			case []int32:
				v = float64(d[k])
			}
			if v != value(k) {
				t.Errorf("HDU %d value %d: %v, want %v", i, k, v, value(k))
				return
			}
		}
	}
	check(0, -32, []int{4, 3}, "", func(k int) float64 { return float64(k) * 0.5 })
	check(1, 16, []int{4, 3, 2}, "SHORTS", func(k int) float64 { return float64(k - 12) })
	check(2, -64, []int{5}, "DOUBLES", func(k int) float64 { return float64(k) / 3 })
	check(3, 32, []int{6}, "INTS", func(k int) float64 { return float64(k) * -100000 })
}

func exitText(err error) string {
	if ee, ok := err.(*exec.ExitError); ok {
		return string(ee.Stderr)
	}
	return ""
}

// fitsverify passes a file with a streamed binary table whose row count was
// corrected after fewer rows came than announced.
func TestFitsverifyTable(t *testing.T) {
	bin := testtool.Require(t, "fitsverify", "fitsverify")
	path := writeTableFile(t, 9, 12)
	out, err := exec.Command(bin, path).CombinedOutput()
	if err != nil {
		t.Fatalf("fitsverify: %v\n%s", err, out)
	}
	if !bytes.Contains(out, []byte("found 0 warning(s) and 0 error(s)")) {
		t.Errorf("fitsverify did not pass cleanly:\n%s", out)
	}
}

// tableScript prints each column of the FRAMES table as astropy reads it: dtype,
// shape and values.
const tableScript = `
import json, sys
from astropy.io import fits
with fits.open(sys.argv[1]) as hdul:
    hdul.verify('exception')
    d = hdul['FRAMES'].data
    cols = hdul['FRAMES'].columns
    json.dump({c.name: {"dtype": d[c.name].dtype.kind + str(d[c.name].dtype.itemsize), "shape": list(d[c.name].shape),
               "unit": c.unit or "", "values": d[c.name].ravel().tolist()} for c in cols}, sys.stdout)
`

// astropy (Debian package python3-astropy) reads our binary tables with the
// types, shapes, units and values written.
func TestAstropyReadsTable(t *testing.T) {
	py := python(t)
	const rows = 9
	path := writeTableFile(t, rows, 12)
	out, err := exec.Command(py, "-c", tableScript, path).Output()
	if err != nil {
		t.Fatalf("astropy: %v\n%s", err, exitText(err))
	}
	var got map[string]struct {
		Dtype  string
		Shape  []int
		Unit   string
		Values []float64
	}
	if err := json.Unmarshal(out, &got); err != nil {
		t.Fatal(err)
	}
	kinds := map[byte]string{'K': "i8", 'B': "u1", 'I': "i2", 'J': "i4", 'E': "f4", 'D': "f8"}
	for k, c := range tableColumns {
		g, ok := got[c.Name]
		if !ok {
			t.Errorf("astropy has no column %s", c.Name)
			continue
		}
		shape := []int{rows}
		if c.Repeat > 1 {
			shape = append(shape, c.Repeat)
		}
		if g.Dtype != kinds[c.Type] || fmt.Sprint(g.Shape) != fmt.Sprint(shape) || g.Unit != c.Unit {
			t.Errorf("column %s: astropy dtype %s shape %v unit %q, want %s %v %q", c.Name, g.Dtype, g.Shape, g.Unit, kinds[c.Type], shape, c.Unit)
			continue
		}
		for i := 0; i < rows; i++ {
			var want []float64
			switch v := tableRow(i)[k].(type) {
			case int64:
				want = []float64{float64(v)}
			case uint8:
				want = []float64{float64(v)}
			case int16:
				want = []float64{float64(v)}
			case int32:
				want = []float64{float64(v)}
			case []float32:
				for _, x := range v {
					want = append(want, float64(x))
				}
			case []float64:
				want = v
			}
			if gotRow := g.Values[i*c.Repeat : (i+1)*c.Repeat]; fmt.Sprint(gotRow) != fmt.Sprint(want) {
				t.Errorf("column %s row %d: astropy %v, want %v", c.Name, i, gotRow, want)
			}
		}
	}
}
