package fits

import (
	"bufio"
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"math"
	"strconv"
	"strings"
)

// Column is one field of a binary table row (FITS Standard 4.0, §7.3.1): Repeat
// values of one type.
type Column struct {
	// Name is the TTYPEn value; names are compared without regard to case.
	Name string
	// Type is the TFORMn data type code. The writer takes 'B' (uint8), 'I' (int16),
	// 'J' (int32), 'K' (int64), 'E' (float32) and 'D' (float64); the reader also
	// accepts L, X, A, C, M, P and Q fields in foreign tables, whose values it keeps
	// only as raw bytes.
	Type byte
	// Repeat is the number of values per row (0 is an empty field).
	Repeat int
	// Unit is the TUNITn value ("" for none).
	Unit string
}

// width is the field's size in bytes within a row.
func (c Column) width() (int, error) {
	var w int
	switch c.Type {
	case 'L', 'B', 'A':
		w = 1
	case 'I':
		w = 2
	case 'J', 'E':
		w = 4
	case 'K', 'D', 'C', 'P':
		w = 8
	case 'M', 'Q':
		w = 16
	case 'X':
		return (c.Repeat + 7) / 8, nil
	default:
		return 0, fmt.Errorf("column %q: TFORM type %q unknown", c.Name, c.Type)
	}
	if (c.Type == 'P' || c.Type == 'Q') && c.Repeat > 1 {
		// A variable-length array descriptor is 0 or 1 per field.
		return 0, fmt.Errorf("column %q: repeat %d of a %c descriptor: at most 1", c.Name, c.Repeat, c.Type)
	}
	return c.Repeat * w, nil
}

// writable reports whether the writer encodes values of this column's type.
func (c Column) writable() bool {
	return strings.IndexByte("BIJKED", c.Type) >= 0
}

// Table is a BINTABLE extension: Rows rows of the Columns, stored as the raw
// big-endian bytes of the file.
type Table struct {
	Columns []Column
	Rows    int
	// Data holds Rows × RowBytes() bytes, row after row.
	Data []byte

	offsets []int
	rowLen  int
}

// layout computes the column offsets and the row length.
func (t *Table) layout() error {
	t.offsets = make([]int, len(t.Columns))
	n := 0
	for i, c := range t.Columns {
		if c.Repeat < 0 || c.Repeat > math.MaxInt32 {
			return fmt.Errorf("column %q: repeat %d out of range", c.Name, c.Repeat)
		}
		w, err := c.width()
		if err != nil {
			return err
		}
		t.offsets[i] = n
		n += w
		if n > math.MaxInt32 {
			return errors.New("table row longer than 2^31 bytes")
		}
	}
	t.rowLen = n
	return nil
}

// RowBytes returns the length of one row in bytes (NAXIS1).
func (t *Table) RowBytes() int {
	if t.offsets == nil {
		if t.layout() != nil {
			return 0
		}
	}
	return t.rowLen
}

// Find returns the index of the column named name (case-insensitive), or −1.
func (t *Table) Find(name string) int {
	for i, c := range t.Columns {
		if strings.EqualFold(c.Name, name) {
			return i
		}
	}
	return -1
}

// Value is a Go type a table column decodes to.
type Value interface {
	uint8 | int16 | int32 | int64 | float32 | float64
}

func typeCode[T Value]() byte {
	var z T
	switch any(z).(type) {
	case uint8:
		return 'B'
	case int16:
		return 'I'
	case int32:
		return 'J'
	case int64:
		return 'K'
	case float32:
		return 'E'
	}
	return 'D'
}

// Values returns the column named name of every row, row after row (Rows × Repeat
// values), and its repeat count. The column must exist and hold exactly the Go
// type T ('B' uint8, 'I' int16, 'J' int32, 'K' int64, 'E' float32, 'D' float64).
func Values[T Value](t *Table, name string) ([]T, int, error) {
	i := t.Find(name)
	if i < 0 {
		return nil, 0, fmt.Errorf("fits: table has no column %q", name)
	}
	c := t.Columns[i]
	if want := typeCode[T](); c.Type != want {
		return nil, 0, fmt.Errorf("fits: column %q has type %c, want %c", name, c.Type, want)
	}
	if t.offsets == nil {
		if err := t.layout(); err != nil {
			return nil, 0, fmt.Errorf("fits: %w", err)
		}
	}
	if len(t.Data) < t.Rows*t.rowLen {
		return nil, 0, fmt.Errorf("fits: table data holds %d bytes, want %d", len(t.Data), t.Rows*t.rowLen)
	}
	out := make([]T, 0, t.Rows*c.Repeat)
	var z T
	size := binary.Size(z)
	for r := 0; r < t.Rows; r++ {
		b := t.Data[r*t.rowLen+t.offsets[i]:]
		for k := 0; k < c.Repeat; k++ {
			out = append(out, decode[T](b[k*size:]))
		}
	}
	return out, c.Repeat, nil
}

func decode[T Value](b []byte) T {
	var v any
	var z T
	switch any(z).(type) {
	case uint8:
		v = b[0]
	case int16:
		v = int16(binary.BigEndian.Uint16(b))
	case int32:
		v = int32(binary.BigEndian.Uint32(b))
	case int64:
		v = int64(binary.BigEndian.Uint64(b))
	case float32:
		v = math.Float32frombits(binary.BigEndian.Uint32(b))
	case float64:
		v = math.Float64frombits(binary.BigEndian.Uint64(b))
	}
	return v.(T)
}

// tableKeyword reports whether key is one the package writes for a table from its
// columns.
func tableKeyword(key string) bool {
	if key == "TFIELDS" {
		return true
	}
	for _, p := range []string{"TTYPE", "TFORM", "TUNIT"} {
		if rest, ok := strings.CutPrefix(key, p); ok {
			if _, err := strconv.Atoi(rest); err == nil {
				return true
			}
		}
	}
	return false
}

// checkTable validates a table HDU before anything is written for it.
func (h *HDU) checkTable(fromData bool) error {
	t := h.Table
	for _, c := range h.Header.Cards {
		if structural(c.Key) || tableKeyword(c.Key) {
			return fmt.Errorf("fits: keyword %s: written by the package from the table", c.Key)
		}
	}
	if h.Data != nil || h.Axes != nil {
		return errors.New("fits: a table HDU has no image axes or data")
	}
	if len(t.Columns) > 999 {
		return fmt.Errorf("fits: %d columns: at most 999", len(t.Columns))
	}
	for _, c := range t.Columns {
		if !c.writable() && (!fromData || c.Type == 'P' || c.Type == 'Q') {
			// Descriptors point into a heap, which this package does not keep.
			return fmt.Errorf("fits: column %q: type %c: the writer takes B, I, J, K, E and D (and L, X, A, C, M read from a file)", c.Name, c.Type)
		}
		if !printable(c.Name) || !printable(c.Unit) {
			return fmt.Errorf("fits: column %q: name or unit holds non-printable characters", c.Name)
		}
	}
	if err := t.layout(); err != nil {
		return fmt.Errorf("fits: %w", err)
	}
	if t.Rows < 0 || int64(t.Rows)*int64(t.rowLen) > maxDataBytes {
		return fmt.Errorf("fits: %d rows of %d bytes: out of range", t.Rows, t.rowLen)
	}
	if fromData && len(t.Data) != t.Rows*t.rowLen {
		return fmt.Errorf("fits: table data of %d bytes: %d rows of %d bytes need %d", len(t.Data), t.Rows, t.rowLen, t.Rows*t.rowLen)
	}
	return nil
}

// tableHeader renders a BINTABLE header (FITS Standard 4.0, §7.3.1): the mandatory
// keywords in order, the column keywords, the user cards, END. NAXIS2 is always the
// fifth card, which lets a streaming writer correct the row count in place.
func (h *HDU) tableHeader() ([]byte, error) {
	t := h.Table
	cards := []Card{
		{Key: "XTENSION", Value: "BINTABLE", Comment: "binary table extension"},
		{Key: "BITPIX", Value: int64(8), Comment: "8-bit bytes"},
		{Key: "NAXIS", Value: int64(2), Comment: "2-dimensional table"},
		{Key: "NAXIS1", Value: int64(t.rowLen), Comment: "bytes per row"},
		{Key: "NAXIS2", Value: int64(t.Rows), Comment: "number of rows"},
		{Key: "PCOUNT", Value: int64(0), Comment: "no heap"},
		{Key: "GCOUNT", Value: int64(1)},
		{Key: "TFIELDS", Value: int64(len(t.Columns)), Comment: "fields per row"},
	}
	for i, c := range t.Columns {
		n := strconv.Itoa(i + 1)
		cards = append(cards,
			Card{Key: "TTYPE" + n, Value: c.Name},
			Card{Key: "TFORM" + n, Value: strconv.Itoa(c.Repeat) + string(c.Type)})
		if c.Unit != "" {
			cards = append(cards, Card{Key: "TUNIT" + n, Value: c.Unit})
		}
	}
	cards = append(cards, h.Header.Cards...)
	var b []byte
	for _, c := range cards {
		var err error
		if b, err = appendCards(b, c); err != nil {
			return nil, err
		}
	}
	b = appendPadded(b, "END")
	for len(b)%blockLen != 0 {
		b = append(b, ' ')
	}
	return b, nil
}

// naxis2Offset is where the NAXIS2 card starts in a table header.
const naxis2Offset = 4 * cardLen

// tableStructure reads the table keywords of a BINTABLE header whose mandatory
// keywords have been checked, and moves the column keywords out of the user cards.
func tableStructure(h *HDU, ints map[string]int64) error {
	if h.Bitpix != 8 || len(h.Axes) != 2 {
		return fmt.Errorf("BINTABLE with BITPIX %d and %d axes: want 8 and 2", h.Bitpix, len(h.Axes))
	}
	if g, ok := ints["GCOUNT"]; ok && g != 1 {
		return fmt.Errorf("GCOUNT %d: must be 1 for a BINTABLE", g)
	}
	nf, ok := h.Header.Int("TFIELDS")
	if !ok || nf < 0 || nf > 999 {
		return errors.New("BINTABLE: TFIELDS missing or not in [0, 999]")
	}
	t := &Table{Rows: h.Axes[1], Columns: make([]Column, nf)}
	for i := range t.Columns {
		n := strconv.Itoa(i + 1)
		form, ok := h.Header.String("TFORM" + n)
		if !ok {
			return fmt.Errorf("BINTABLE: TFORM%s missing", n)
		}
		c, err := parseForm(strings.TrimSpace(form))
		if err != nil {
			return fmt.Errorf("BINTABLE: TFORM%s %q: %w", n, form, err)
		}
		c.Name, _ = h.Header.String("TTYPE" + n)
		c.Unit, _ = h.Header.String("TUNIT" + n)
		t.Columns[i] = c
	}
	if err := t.layout(); err != nil {
		return fmt.Errorf("BINTABLE: %w", err)
	}
	if t.rowLen != h.Axes[0] {
		return fmt.Errorf("BINTABLE: fields take %d bytes, NAXIS1 is %d", t.rowLen, h.Axes[0])
	}
	var user []Card
	for _, c := range h.Header.Cards {
		if !tableKeyword(c.Key) {
			user = append(user, c)
		}
	}
	h.Header.Cards = user
	h.Table = t
	h.Bitpix, h.Axes = 0, nil
	return nil
}

// parseForm reads a TFORMn value rT, where r (default 1) is the repeat count;
// for P and Q descriptors the element type and maximum length that follow are
// kept in neither.
func parseForm(s string) (Column, error) {
	i := 0
	for i < len(s) && s[i] >= '0' && s[i] <= '9' {
		i++
	}
	if i == len(s) {
		return Column{}, errors.New("no data type")
	}
	rep := 1
	if i > 0 {
		r, err := strconv.Atoi(s[:i])
		if err != nil || r > math.MaxInt32 {
			return Column{}, errors.New("repeat count out of range")
		}
		rep = r
	}
	c := Column{Type: s[i], Repeat: rep}
	if _, err := c.width(); err != nil {
		return Column{}, err
	}
	if rest := s[i+1:]; rest != "" && c.Type != 'P' && c.Type != 'Q' && c.Type != 'A' {
		return Column{}, fmt.Errorf("unexpected %q after the type", rest)
	}
	return c, nil
}

// readTable reads the rows of a table (and skips its heap, of pcount bytes).
func readTable(r io.Reader, t *Table, pcount int64) error {
	total := int64(t.Rows) * int64(t.rowLen)
	if total+pcount > maxDataBytes {
		return fmt.Errorf("table claims more than %d bytes", int64(maxDataBytes))
	}
	var data []byte
	buf := make([]byte, min(total, readChunk))
	for done := int64(0); done < total; {
		b := buf[:min(int64(len(buf)), total-done)]
		if _, err := io.ReadFull(r, b); err != nil {
			return fmt.Errorf("table truncated after %d of %d bytes: %w", done, total, io.ErrUnexpectedEOF)
		}
		data = append(data, b...)
		done += int64(len(b))
	}
	t.Data = data
	skip := pcount
	if rem := (total + pcount) % blockLen; rem != 0 {
		skip += blockLen - rem
	}
	if n, err := io.CopyN(io.Discard, r, skip); err != nil || n != skip {
		return fmt.Errorf("table heap or padding truncated: %w", io.ErrUnexpectedEOF)
	}
	return nil
}

// TableWriter streams the rows of a BINTABLE extension, for tables too large to
// hold in memory. It writes the header with the row count announced, then each row
// as it comes; Close pads the data and, when fewer rows came than announced,
// rewrites the NAXIS2 card in place, which needs an io.WriteSeeker.
type TableWriter struct {
	w        io.Writer
	bw       *bufio.Writer
	t        *Table
	announce int
	start    int64 // offset of the header from the start of the stream, when seekable
	seekable bool
	rows     int
	row      []byte
	err      error
}

// NewTableWriter writes the header of a BINTABLE extension to w, which must be
// positioned after the HDUs written before it, announcing rows rows. The table
// takes its columns from t; t.Rows and t.Data are ignored.
func NewTableWriter(w io.Writer, header Header, columns []Column, rows int) (*TableWriter, error) {
	h := &HDU{Header: header, Table: &Table{Columns: columns, Rows: rows}}
	if err := h.checkTable(false); err != nil {
		return nil, err
	}
	b, err := h.tableHeader()
	if err != nil {
		return nil, err
	}
	tw := &TableWriter{w: w, t: h.Table, announce: rows, row: make([]byte, h.Table.rowLen)}
	if s, ok := w.(io.WriteSeeker); ok {
		if off, err := s.Seek(0, io.SeekCurrent); err == nil {
			tw.start, tw.seekable = off, true
		}
	}
	tw.bw = bufio.NewWriterSize(w, 1<<16)
	if _, err := tw.bw.Write(b); err != nil {
		return nil, fmt.Errorf("fits: write: %w", err)
	}
	return tw, nil
}

// Rows returns the number of rows written so far.
func (tw *TableWriter) Rows() int { return tw.rows }

// WriteRow writes one row: one value per column, in order, each a slice of the
// column's Go type with Repeat elements or, for Repeat 1, a single value of it.
func (tw *TableWriter) WriteRow(values ...any) error {
	if tw.err != nil {
		return tw.err
	}
	if tw.rows == tw.announce {
		return fmt.Errorf("fits: table of %d rows is full", tw.announce)
	}
	if len(values) != len(tw.t.Columns) {
		return fmt.Errorf("fits: %d values for %d columns", len(values), len(tw.t.Columns))
	}
	for i, v := range values {
		if err := encodeField(tw.row[tw.t.offsets[i]:], tw.t.Columns[i], v); err != nil {
			return err
		}
	}
	if _, err := tw.bw.Write(tw.row); err != nil {
		tw.err = fmt.Errorf("fits: write: %w", err)
		return tw.err
	}
	tw.rows++
	return nil
}

// encodeField writes v big-endian into b for column c.
func encodeField(b []byte, c Column, v any) error {
	n := -1
	bad := func() error {
		return fmt.Errorf("fits: column %q (%d%c): value of type %T with %d elements", c.Name, c.Repeat, c.Type, v, n)
	}
	switch x := v.(type) {
	case uint8:
		return encodeField(b, c, []uint8{x})
	case int16:
		return encodeField(b, c, []int16{x})
	case int32:
		return encodeField(b, c, []int32{x})
	case int64:
		return encodeField(b, c, []int64{x})
	case float32:
		return encodeField(b, c, []float32{x})
	case float64:
		return encodeField(b, c, []float64{x})
	case []uint8:
		if n = len(x); c.Type != 'B' || n != c.Repeat {
			return bad()
		}
		copy(b, x)
	case []int16:
		if n = len(x); c.Type != 'I' || n != c.Repeat {
			return bad()
		}
		for i, e := range x {
			binary.BigEndian.PutUint16(b[2*i:], uint16(e))
		}
	case []int32:
		if n = len(x); c.Type != 'J' || n != c.Repeat {
			return bad()
		}
		for i, e := range x {
			binary.BigEndian.PutUint32(b[4*i:], uint32(e))
		}
	case []int64:
		if n = len(x); c.Type != 'K' || n != c.Repeat {
			return bad()
		}
		for i, e := range x {
			binary.BigEndian.PutUint64(b[8*i:], uint64(e))
		}
	case []float32:
		if n = len(x); c.Type != 'E' || n != c.Repeat {
			return bad()
		}
		for i, e := range x {
			binary.BigEndian.PutUint32(b[4*i:], math.Float32bits(e))
		}
	case []float64:
		if n = len(x); c.Type != 'D' || n != c.Repeat {
			return bad()
		}
		for i, e := range x {
			binary.BigEndian.PutUint64(b[8*i:], math.Float64bits(e))
		}
	default:
		return bad()
	}
	return nil
}

// Close pads the data to a whole record and, when fewer rows were written than
// announced, corrects NAXIS2 in the header. It does not close the underlying
// writer, which is left at the end of the table.
func (tw *TableWriter) Close() error {
	if tw.err != nil {
		return tw.err
	}
	if rem := int64(tw.rows) * int64(tw.t.rowLen) % blockLen; rem != 0 {
		if _, err := tw.bw.Write(make([]byte, blockLen-rem)); err != nil {
			return fmt.Errorf("fits: write: %w", err)
		}
	}
	if err := tw.bw.Flush(); err != nil {
		return fmt.Errorf("fits: write: %w", err)
	}
	if tw.rows == tw.announce {
		return nil
	}
	if !tw.seekable {
		return fmt.Errorf("fits: %d of %d announced rows written to a writer that cannot seek back to correct NAXIS2", tw.rows, tw.announce)
	}
	s := tw.w.(io.WriteSeeker)
	end, err := s.Seek(0, io.SeekCurrent)
	if err != nil {
		return fmt.Errorf("fits: %w", err)
	}
	card, _ := appendCards(nil, Card{Key: "NAXIS2", Value: int64(tw.rows), Comment: "number of rows"})
	if _, err := s.Seek(tw.start+naxis2Offset, io.SeekStart); err != nil {
		return fmt.Errorf("fits: %w", err)
	}
	if _, err := s.Write(card); err != nil {
		return fmt.Errorf("fits: write: %w", err)
	}
	if _, err := s.Seek(end, io.SeekStart); err != nil {
		return fmt.Errorf("fits: %w", err)
	}
	return nil
}
