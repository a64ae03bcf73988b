package fits

import (
	"bytes"
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"path/filepath"
	"reflect"
	"strings"
	"testing"
)

// sample returns an HDU of the given BITPIX and axes filled with values that use
// the sign bit and, for floats, fractions and extreme exponents.
func sample(bitpix int, axes ...int) *HDU {
	n := 1
	for _, a := range axes {
		n *= a
	}
	h := &HDU{Bitpix: bitpix, Axes: axes}
	switch bitpix {
	case -32:
		d := make([]float32, n)
		for i := range d {
			d[i] = float32(i-n/2) * 0.37
		}
		d[0] = math.MaxFloat32
		h.Data = d
	case -64:
		d := make([]float64, n)
		for i := range d {
			d[i] = float64(i-n/2) * 1.000000000001e-3
		}
		d[0] = -math.SmallestNonzeroFloat64
		h.Data = d
	case 16:
		d := make([]int16, n)
		for i := range d {
			d[i] = int16(i*977 - 20000)
		}
		d[0] = math.MinInt16
		h.Data = d
	case 32:
		d := make([]int32, n)
		for i := range d {
			d[i] = int32(i*1234567 - 1<<30)
		}
		d[0] = math.MaxInt32
		h.Data = d
	}
	h.Header.Set("EXTNAME", fmt.Sprintf("BITPIX%d_%dD", bitpix, len(axes)), "")
	return h
}

func allSamples() []*HDU {
	var hdus []*HDU
	for _, bp := range []int{-32, -64, 16, 32} {
		for _, axes := range [][]int{{7}, {5, 3}, {4, 3, 2}} {
			hdus = append(hdus, sample(bp, axes...))
		}
	}
	return hdus
}

// The pure-Go round trip: every BITPIX with 1, 2 and 3 axes, alone as a primary
// HDU and all together as one multi-extension file.
func TestRoundTrip(t *testing.T) {
	for _, h := range allSamples() {
		var buf bytes.Buffer
		if err := Write(&buf, h); err != nil {
			t.Fatalf("BITPIX %d axes %v: %v", h.Bitpix, h.Axes, err)
		}
		// FITS Standard 4.0, §3.1: a file is a whole number of 2880-byte records.
		if buf.Len()%2880 != 0 {
			t.Errorf("BITPIX %d axes %v: %d bytes, not a multiple of 2880", h.Bitpix, h.Axes, buf.Len())
		}
		got, err := Read(&buf)
		if err != nil {
			t.Fatalf("BITPIX %d axes %v: %v", h.Bitpix, h.Axes, err)
		}
		if len(got) != 1 || !reflect.DeepEqual(got[0], h) {
			t.Errorf("BITPIX %d axes %v: read back %+v", h.Bitpix, h.Axes, got[0])
		}
	}
	all := allSamples()
	var buf bytes.Buffer
	if err := Write(&buf, all...); err != nil {
		t.Fatal(err)
	}
	got, err := Read(&buf)
	if err != nil {
		t.Fatal(err)
	}
	if !reflect.DeepEqual(got, all) {
		t.Errorf("multi-HDU round trip differs")
	}
}

func headerSample() Header {
	var h Header
	h.Set("OBJECT", "it's a test", "quote doubled inside")
	h.Set("EMPTYSTR", "", "")
	h.Set("LEADSP", "  lead", "leading spaces are significant")
	h.Set("FLAG", true, "")
	h.Set("NOFLAG", false, "logical false")
	h.Set("COUNT", 42, "an int")
	h.Set("NEG", int64(-9007199254740993), "")
	h.Set("PIXSCALE", 0.0375, "m per pixel")
	h.Set("TINY", 5e-7, "")
	h.Set("HUGE", -1.7976931348623157e308, "")
	h.Set("WHOLE", 3.0, "float with an integral value")
	h.Set("COMMENT", nil, "a commentary card")
	h.Set("HISTORY", nil, "written by the test")
	h.Set("UNDEF", nil, "undefined value")
	return h
}

func TestHeaderRoundTrip(t *testing.T) {
	h := sample(-32, 3, 2)
	h.Header = headerSample()
	var buf bytes.Buffer
	if err := Write(&buf, h); err != nil {
		t.Fatal(err)
	}
	got, err := Read(&buf)
	if err != nil {
		t.Fatal(err)
	}
	if !reflect.DeepEqual(got[0].Header, h.Header) {
		t.Errorf("header round trip:\n got %+v\nwant %+v", got[0].Header.Cards, h.Header.Cards)
	}
	hd := got[0].Header
	if v, ok := hd.Float("PIXSCALE"); !ok || v != 0.0375 {
		t.Errorf("Float(PIXSCALE) = %v, %v", v, ok)
	}
	if v, ok := hd.Float("COUNT"); !ok || v != 42 {
		t.Errorf("Float(COUNT) = %v, %v (integers convert)", v, ok)
	}
	if v, ok := hd.Int("COUNT"); !ok || v != 42 {
		t.Errorf("Int(COUNT) = %v, %v", v, ok)
	}
	if _, ok := hd.Int("PIXSCALE"); ok {
		t.Errorf("Int(PIXSCALE) accepted a float")
	}
	if v, ok := hd.String("object"); !ok || v != "it's a test" {
		t.Errorf("String(object) = %q, %v", v, ok)
	}
	if c := hd.Comments("COMMENT"); len(c) != 1 || c[0] != "a commentary card" {
		t.Errorf("Comments = %q", c)
	}
}

func TestSetReplaces(t *testing.T) {
	var h Header
	h.Set("A", 1, "first")
	h.Set("B", "x", "")
	h.Set("a", 2.5, "second")
	if len(h.Cards) != 2 || h.Cards[0] != (Card{Key: "A", Value: 2.5, Comment: "second"}) {
		t.Errorf("Set did not replace in place: %+v", h.Cards)
	}
}

// FITS Standard 4.0, §4.1 and §5.3: fixed-format cards (logical in column 30, string
// from column 11) and big-endian IEEE data.
func TestLayout(t *testing.T) {
	h := &HDU{Bitpix: -32, Axes: []int{2}, Data: []float32{1, -2}}
	h.Header.Set("NAME", "ab", "")
	var buf bytes.Buffer
	if err := Write(&buf, h); err != nil {
		t.Fatal(err)
	}
	b := buf.Bytes()
	card := func(i int) string { return string(b[80*i : 80*i+80]) }
	if want := "SIMPLE  =                    T"; !strings.HasPrefix(card(0), want) {
		t.Errorf("card 0 %q, want prefix %q", card(0), want)
	}
	if want := "BITPIX  =                  -32"; !strings.HasPrefix(card(1), want) {
		t.Errorf("card 1 %q, want prefix %q", card(1), want)
	}
	if want := "NAME    = 'ab      '" + strings.Repeat(" ", 60); card(4) != want {
		t.Errorf("card 4 %q, want %q", card(4), want)
	}
	if want := "END" + strings.Repeat(" ", 77); card(5) != want {
		t.Errorf("card 5 %q, want %q", card(5), want)
	}
	if got := binary.BigEndian.Uint32(b[2880:]); got != 0x3f800000 {
		t.Errorf("first value bytes %08x, want 3f800000 (IEEE 754 big-endian 1.0)", got)
	}
	if len(b) != 2*2880 {
		t.Errorf("file is %d bytes, want 5760", len(b))
	}
}

func TestHeaderOnlyPrimary(t *testing.T) {
	p := &HDU{Bitpix: 16}
	p.Header.Set("ORIGIN", "test", "")
	e := sample(-64, 2, 2)
	var buf bytes.Buffer
	if err := Write(&buf, p, e); err != nil {
		t.Fatal(err)
	}
	got, err := Read(&buf)
	if err != nil {
		t.Fatal(err)
	}
	if len(got) != 2 || got[0].Data != nil || len(got[0].Axes) != 0 || !reflect.DeepEqual(got[1], e) {
		t.Errorf("header-only primary round trip: %+v", got)
	}
}

func TestWriteRejects(t *testing.T) {
	long := strings.Repeat("x", 69)
	cases := map[string]*HDU{
		"bitpix 8":         {Bitpix: 8, Axes: []int{1}, Data: []uint8{1}},
		"wrong type":       {Bitpix: -32, Axes: []int{1}, Data: []float64{1}},
		"wrong length":     {Bitpix: 16, Axes: []int{2, 2}, Data: []int16{1, 2, 3}},
		"four axes":        {Bitpix: 16, Axes: []int{1, 1, 1, 1}, Data: []int16{1}},
		"zero axis":        {Bitpix: 16, Axes: []int{0}, Data: []int16{}},
		"data without axe": {Bitpix: 16, Data: []int16{1}},
		"structural key":   {Bitpix: 16, Axes: []int{1}, Data: []int16{1}, Header: Header{Cards: []Card{{Key: "NAXIS1", Value: int64(3)}}}},
		"long key":         {Bitpix: 16, Axes: []int{1}, Data: []int16{1}, Header: Header{Cards: []Card{{Key: "TOOLONGKEY", Value: int64(3)}}}},
		"lower key":        {Bitpix: 16, Axes: []int{1}, Data: []int16{1}, Header: Header{Cards: []Card{{Key: "low", Value: int64(3)}}}},
		"nan value":        {Bitpix: 16, Axes: []int{1}, Data: []int16{1}, Header: Header{Cards: []Card{{Key: "X", Value: math.NaN()}}}},
		"long string":      {Bitpix: 16, Axes: []int{1}, Data: []int16{1}, Header: Header{Cards: []Card{{Key: "X", Value: long}}}},
		"control char":     {Bitpix: 16, Axes: []int{1}, Data: []int16{1}, Header: Header{Cards: []Card{{Key: "X", Value: "a\nb"}}}},
		"bad value type":   {Bitpix: 16, Axes: []int{1}, Data: []int16{1}, Header: Header{Cards: []Card{{Key: "X", Value: []int{1}}}}},
	}
	for name, h := range cases {
		t.Run(name, func(t *testing.T) {
			var buf bytes.Buffer
			if err := Write(&buf, sample(16, 2), h); err == nil {
				t.Errorf("%s: Write accepted it", name)
			} else if buf.Len() != 0 {
				t.Errorf("%s: %d bytes written before the error", name, buf.Len())
			}
		})
	}
}

func validFile(t testing.TB) []byte {
	var buf bytes.Buffer
	h := sample(-32, 4, 3)
	h.Header = headerSample()
	if err := Write(&buf, h, sample(16, 5, 2, 2)); err != nil {
		t.Fatal(err)
	}
	return buf.Bytes()
}

func TestReadRejectsTruncated(t *testing.T) {
	b := validFile(t)
	// A file cut at the end of the first HDU is a complete one-HDU file.
	boundary := 2 * 2880
	for n := 0; n < len(b); n += 80 {
		hdus, err := Read(bytes.NewReader(b[:n]))
		if n == boundary {
			if err != nil || len(hdus) != 1 {
				t.Errorf("cut at the HDU boundary: %d HDUs, %v", len(hdus), err)
			}
			continue
		}
		if err == nil {
			t.Fatalf("Read accepted the file cut at %d of %d bytes", n, len(b))
		}
	}
	if _, err := Read(bytes.NewReader(b[:len(b)-1])); !errors.Is(err, io.ErrUnexpectedEOF) {
		t.Errorf("cut by one byte: %v, want ErrUnexpectedEOF", err)
	}
}

func TestReadRejectsCorrupt(t *testing.T) {
	b := validFile(t)
	patch := func(card int, text string) []byte {
		c := bytes.Clone(b)
		copy(c[80*card:80*card+80], appendPadded(nil, text))
		return c
	}
	cases := map[string][]byte{
		"not SIMPLE":   patch(0, "SIMPLE  =                    F"),
		"bitpix 8":     patch(1, "BITPIX  =                    8"),
		"bitpix float": patch(1, "BITPIX  =                -32.0"),
		"naxis 4":      patch(2, "NAXIS   =                    4"),
		"negative":     patch(3, "NAXIS1  =                   -4"),
		"huge axis":    patch(3, "NAXIS1  =           2147483647"),
		"bad value":    patch(5, "OBJECT  = 12abc"),
		"open quote":   patch(5, "OBJECT  = 'no end"),
		"garbage":      patch(5, "OBJECT  = 1 2"),
		"no extension": append(b[:2880*2:2880*2], bytes.Repeat([]byte{' '}, 2880)...),
	}
	for name, data := range cases {
		t.Run(name, func(t *testing.T) {
			if _, err := Read(bytes.NewReader(data)); err == nil {
				t.Errorf("%s: Read accepted it", name)
			}
		})
	}
}

func TestWriteFileAtomic(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "cube.fits")
	want := allSamples()
	if err := WriteFile(path, want...); err != nil {
		t.Fatal(err)
	}
	got, err := ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	if !reflect.DeepEqual(got, want) {
		t.Errorf("ReadFile differs from what WriteFile wrote")
	}
	// A failed write leaves the previous file intact and no temporary behind.
	if err := WriteFile(path, &HDU{Bitpix: 3}); err == nil {
		t.Fatal("WriteFile accepted BITPIX 3")
	}
	if got, err := ReadFile(path); err != nil || !reflect.DeepEqual(got, want) {
		t.Errorf("previous file damaged by a failed write: %v", err)
	}
	entries, _ := os.ReadDir(dir)
	if len(entries) != 1 {
		t.Errorf("directory holds %d entries after a failed write, want 1", len(entries))
	}
}

func FuzzRead(f *testing.F) {
	// Small seeds: the fuzzer slows down sharply on inputs of many records.
	small := &HDU{Bitpix: 16, Axes: []int{2}, Data: []int16{-1, 7}}
	small.Header.Set("GAIN", 1.5, "")
	var b bytes.Buffer
	if err := Write(&b, small); err != nil {
		f.Fatal(err)
	}
	f.Add(b.Bytes())
	f.Add([]byte("SIMPLE  =                    T"))
	// A small binary table after a header-only primary.
	var tb bytes.Buffer
	if err := Write(&tb, &HDU{Bitpix: -32}); err != nil {
		f.Fatal(err)
	}
	tw, err := NewTableWriter(&tb, Header{}, []Column{{Name: "N", Type: 'J', Repeat: 1}, {Name: "V", Type: 'E', Repeat: 2}}, 2)
	if err != nil {
		f.Fatal(err)
	}
	tw.WriteRow(int32(1), []float32{1, 2})
	tw.WriteRow(int32(2), []float32{3, 4})
	if err := tw.Close(); err != nil {
		f.Fatal(err)
	}
	f.Add(tb.Bytes())
	f.Fuzz(func(t *testing.T, data []byte) {
		hdus, err := Read(bytes.NewReader(data))
		if err != nil {
			return
		}
		// Whatever Read accepts is either refused by Write or read back unchanged.
		var buf bytes.Buffer
		if Write(&buf, hdus...) != nil {
			return
		}
		again, err := Read(&buf)
		if err != nil {
			t.Fatalf("re-reading a written file: %v", err)
		}
		if len(again) != len(hdus) {
			t.Fatalf("re-read %d HDUs, want %d", len(again), len(hdus))
		}
	})
}
