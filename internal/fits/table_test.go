package fits

import (
	"bytes"
	"fmt"
	"os"
	"path/filepath"
	"slices"
	"testing"
)

// tableColumns covers every type the writer takes, scalar and vector fields.
var tableColumns = []Column{
	{Name: "FRAME", Type: 'K', Repeat: 1},
	{Name: "STATE", Type: 'B', Repeat: 1},
	{Name: "COUNT", Type: 'I', Repeat: 1},
	{Name: "SAT", Type: 'J', Repeat: 1},
	{Name: "SLOPES", Type: 'E', Repeat: 3, Unit: "rad"},
	{Name: "RMS", Type: 'D', Repeat: 2, Unit: "m"},
}

func tableRow(i int) []any {
	f := float32(i)
	return []any{int64(1e12) + int64(i), uint8(i % 6), int16(-i), int32(i * 1000), []float32{f, -f, f / 4}, []float64{float64(i) / 3, -1e-9}}
}

// writeTableFile writes a primary HDU, one image extension and a table of rows
// rows announced as announced rows, then an extension after the table.
func writeTableFile(t *testing.T, rows, announced int) string {
	t.Helper()
	path := filepath.Join(t.TempDir(), "table.fits")
	f, err := os.Create(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	img := &HDU{Bitpix: 32, Axes: []int{3}, Data: []int32{4, 5, 6}}
	img.Header.Set("EXTNAME", "VALID", "")
	if err := Write(f, &HDU{Bitpix: -32}, img); err != nil {
		t.Fatal(err)
	}
	var h Header
	h.Set("EXTNAME", "FRAMES", "one row per frame")
	tw, err := NewTableWriter(f, h, tableColumns, announced)
	if err != nil {
		t.Fatal(err)
	}
	for i := 0; i < rows; i++ {
		if err := tw.WriteRow(tableRow(i)...); err != nil {
			t.Fatal(err)
		}
	}
	if err := tw.Close(); err != nil {
		t.Fatal(err)
	}
	after := &HDU{Bitpix: -32}
	after.Header.Set("EXTNAME", "AFTER", "")
	after.Header.Set("R0", 0.12, "m")
	if err := AppendExtensions(f, after); err != nil {
		t.Fatal(err)
	}
	return path
}

func TestTableRoundTrip(t *testing.T) {
	for _, c := range []struct{ rows, announced int }{{5, 5}, {3, 7}, {0, 2}, {900, 1000}} {
		t.Run(fmt.Sprintf("%d rows of %d announced", c.rows, c.announced), func(t *testing.T) {
			path := writeTableFile(t, c.rows, c.announced)
			hdus, err := ReadFile(path)
			if err != nil {
				t.Fatalf("%d of %d rows: %v", c.rows, c.announced, err)
			}
			if len(hdus) != 4 || hdus[2].Table == nil {
				t.Fatalf("%d HDUs, table %v", len(hdus), hdus[2].Table)
			}
			tb := hdus[2].Table
			if tb.Rows != c.rows {
				t.Fatalf("%d rows read, %d written", tb.Rows, c.rows)
			}
			if s, _ := hdus[2].Header.String("EXTNAME"); s != "FRAMES" {
				t.Errorf("EXTNAME %q", s)
			}
			if v, _ := hdus[3].Header.Float("R0"); v != 0.12 {
				t.Errorf("extension after the table: R0 = %v", v)
			}
			if !slices.Equal(tb.Columns, tableColumns) {
				t.Errorf("columns %+v, want %+v", tb.Columns, tableColumns)
			}
			frames, _, _ := Values[int64](tb, "frame")
			states, _, _ := Values[uint8](tb, "STATE")
			counts, _, _ := Values[int16](tb, "COUNT")
			sats, _, _ := Values[int32](tb, "SAT")
			slopes, rs, _ := Values[float32](tb, "SLOPES")
			rms, rr, err := Values[float64](tb, "RMS")
			if err != nil || rs != 3 || rr != 2 {
				t.Fatalf("repeats %d %d, %v", rs, rr, err)
			}
			for i := 0; i < c.rows; i++ {
				want := tableRow(i)
				if frames[i] != want[0] || states[i] != want[1] || counts[i] != want[2] || sats[i] != want[3] ||
					!slices.Equal(slopes[3*i:3*i+3], want[4].([]float32)) || !slices.Equal(rms[2*i:2*i+2], want[5].([]float64)) {
					t.Fatalf("row %d differs", i)
				}
			}
			// What was read writes back to the same bytes.
			var buf bytes.Buffer
			if err := Write(&buf, hdus...); err != nil {
				t.Fatal(err)
			}
			orig, _ := os.ReadFile(path)
			if !bytes.Equal(buf.Bytes(), orig) {
				t.Errorf("%d of %d rows: rewritten file differs from the streamed one", c.rows, c.announced)
			}
		})
	}
}

func TestTableRejects(t *testing.T) {
	if _, _, err := Values[float64](&Table{Columns: tableColumns}, "SLOPES"); err == nil {
		t.Error("Values of a float32 column as float64 accepted")
	}
	if _, _, err := Values[float32](&Table{Columns: tableColumns}, "NONE"); err == nil {
		t.Error("Values of a missing column accepted")
	}
	var buf bytes.Buffer
	if _, err := NewTableWriter(&buf, Header{}, []Column{{Name: "X", Type: 'P', Repeat: 1}}, 1); err == nil {
		t.Error("a descriptor column accepted by the writer")
	}
	var h Header
	h.Set("TFORM1", "1E", "")
	if _, err := NewTableWriter(&buf, h, tableColumns, 1); err == nil {
		t.Error("a user TFORM1 card accepted")
	}
	tw, err := NewTableWriter(&bytes.Buffer{}, Header{}, tableColumns, 1)
	if err != nil {
		t.Fatal(err)
	}
	row := tableRow(1)
	row[4] = []float32{1, 2}
	if err := tw.WriteRow(row...); err == nil {
		t.Error("a vector of the wrong length accepted")
	}
	if err := tw.WriteRow(tableRow(1)[:5]...); err == nil {
		t.Error("a row with a column missing accepted")
	}
	if err := tw.WriteRow(tableRow(1)...); err != nil {
		t.Fatal(err)
	}
	if err := tw.WriteRow(tableRow(2)...); err == nil {
		t.Error("a row past the announced count accepted")
	}
	// Fewer rows than announced on a writer that cannot seek is an error, not a
	// silently wrong NAXIS2.
	tw, _ = NewTableWriter(&bytes.Buffer{}, Header{}, tableColumns, 3)
	tw.WriteRow(tableRow(0)...)
	if err := tw.Close(); err == nil {
		t.Error("short table on an unseekable writer closed without error")
	}
	// A truncated table and a table whose fields do not fill NAXIS1 are refused.
	b, _ := os.ReadFile(writeTableFile(t, 40, 40))
	if _, err := Read(bytes.NewReader(b[:len(b)-2880-100])); err == nil {
		t.Error("truncated table read")
	}
	i := bytes.Index(b, []byte("NAXIS1  ="))
	i = bytes.Index(b[i+1:], []byte("NAXIS1  =")) + i + 1
	i = bytes.Index(b[i+1:], []byte("NAXIS1  =")) + i + 1
	bad := bytes.Clone(b)
	copy(bad[i:i+80], appendPadded(nil, "NAXIS1  =                   99"))
	if _, err := Read(bytes.NewReader(bad)); err == nil {
		t.Error("NAXIS1 that does not match the fields read")
	}
}
