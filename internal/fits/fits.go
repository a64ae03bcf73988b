package fits

import (
	"bufio"
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"strconv"
	"strings"

	"stillsky/internal/atomicfile"
)

// blockLen is the FITS logical record length in bytes (FITS Standard 4.0, §3.1).
const blockLen = 2880

// maxAxes is the largest NAXIS this package handles.
const maxAxes = 3

// maxDataBytes bounds the data size claimed by a header, so that a corrupt NAXISn
// cannot overflow the size computation.
const maxDataBytes = 1 << 40

// HDU is one header-data unit: a primary array, an IMAGE extension or, with Table
// set, a BINTABLE extension.
type HDU struct {
	// Header holds the user keywords (EXTNAME among them for a named extension).
	Header Header
	// Bitpix is −32, −64, 16 or 32.
	Bitpix int
	// Axes are the NAXISn values, NAXIS1 (fastest varying) first; 0 to 3 of them.
	// An HDU without axes has no data.
	Axes []int
	// Data is []float32 (−32), []float64 (−64), []int16 (16) or []int32 (32) with
	// the product of Axes elements, or nil when there are no axes.
	Data any
	// Table, when not nil, makes the HDU a BINTABLE extension; Bitpix, Axes and
	// Data are then unused (zero).
	Table *Table
}

func bytesPer(bitpix int) (int, error) {
	switch bitpix {
	case -32, 32:
		return 4, nil
	case -64:
		return 8, nil
	case 16:
		return 2, nil
	}
	return 0, fmt.Errorf("fits: BITPIX %d: must be -32, -64, 16 or 32", bitpix)
}

func dataLen(data any) (int, bool) {
	switch d := data.(type) {
	case []float32:
		return len(d), true
	case []float64:
		return len(d), true
	case []int16:
		return len(d), true
	case []int32:
		return len(d), true
	}
	return 0, false
}

// check validates an HDU before anything is written for it.
func (h *HDU) check() error {
	if h.Table != nil {
		return h.checkTable(true)
	}
	for _, c := range h.Header.Cards {
		if structural(c.Key) {
			return fmt.Errorf("fits: keyword %s: structural keywords are written by the package", c.Key)
		}
	}
	if _, err := bytesPer(h.Bitpix); err != nil {
		return err
	}
	if len(h.Axes) > maxAxes {
		return fmt.Errorf("fits: %d axes: at most %d are supported", len(h.Axes), maxAxes)
	}
	n := 1
	for i, a := range h.Axes {
		if a < 1 || a > math.MaxInt32 {
			return fmt.Errorf("fits: NAXIS%d %d: must be in [1, 2^31)", i+1, a)
		}
		n *= a
		if n > maxDataBytes {
			return fmt.Errorf("fits: axes %v: data too large", h.Axes)
		}
	}
	if len(h.Axes) == 0 {
		if h.Data != nil {
			return errors.New("fits: data given for an HDU without axes")
		}
		return nil
	}
	want := map[int]string{-32: "[]float32", -64: "[]float64", 16: "[]int16", 32: "[]int32"}[h.Bitpix]
	got, ok := dataLen(h.Data)
	if !ok || fmt.Sprintf("%T", h.Data) != want {
		return fmt.Errorf("fits: BITPIX %d: data of type %T, want %s", h.Bitpix, h.Data, want)
	}
	if got != n {
		return fmt.Errorf("fits: data length %d: axes %v need %d", got, h.Axes, n)
	}
	return nil
}

// Write writes the HDUs as one FITS file: the first as the primary HDU, the others
// as IMAGE or BINTABLE extensions. Nothing is written when an HDU is invalid.
func Write(w io.Writer, hdus ...*HDU) error {
	if len(hdus) == 0 {
		return errors.New("fits: no HDU to write")
	}
	if hdus[0].Table != nil {
		return errors.New("fits: HDU 0: the primary HDU cannot be a table")
	}
	return write(w, true, hdus)
}

// AppendExtensions writes the HDUs as extensions, to follow a primary HDU (and
// any extensions) already written to w by Write or a TableWriter. Nothing is
// written when an HDU is invalid.
func AppendExtensions(w io.Writer, hdus ...*HDU) error {
	return write(w, false, hdus)
}

func write(w io.Writer, withPrimary bool, hdus []*HDU) error {
	headers := make([][]byte, len(hdus))
	for i, h := range hdus {
		if err := h.check(); err != nil {
			return fmt.Errorf("HDU %d: %w", i, err)
		}
		var b []byte
		var err error
		if h.Table != nil {
			b, err = h.tableHeader()
		} else {
			b, err = h.header(withPrimary && i == 0, len(hdus) > 1)
		}
		if err != nil {
			return fmt.Errorf("HDU %d: %w", i, err)
		}
		headers[i] = b
	}
	bw := bufio.NewWriterSize(w, 1<<16)
	for i, h := range hdus {
		if _, err := bw.Write(headers[i]); err != nil {
			return fmt.Errorf("fits: write: %w", err)
		}
		data := h.Data
		if h.Table != nil {
			data = h.Table.Data
		}
		if err := writeData(bw, data); err != nil {
			return fmt.Errorf("fits: write: %w", err)
		}
	}
	if err := bw.Flush(); err != nil {
		return fmt.Errorf("fits: write: %w", err)
	}
	return nil
}

// header renders the structural keywords in the order the standard requires
// (FITS Standard 4.0, §4.4.1), then the user cards and END, padded with spaces to a
// whole number of records.
func (h *HDU) header(primary, extend bool) ([]byte, error) {
	cards := make([]Card, 0, 8+len(h.Header.Cards))
	if primary {
		cards = append(cards, Card{Key: "SIMPLE", Value: true, Comment: "conforms to FITS Standard 4.0"})
	} else {
		cards = append(cards, Card{Key: "XTENSION", Value: "IMAGE", Comment: "image extension"})
	}
	cards = append(cards,
		Card{Key: "BITPIX", Value: int64(h.Bitpix), Comment: "bits per data value"},
		Card{Key: "NAXIS", Value: int64(len(h.Axes)), Comment: "number of axes"})
	for i, a := range h.Axes {
		cards = append(cards, Card{Key: "NAXIS" + strconv.Itoa(i+1), Value: int64(a)})
	}
	if primary && extend {
		cards = append(cards, Card{Key: "EXTEND", Value: true, Comment: "extensions may follow"})
	}
	if !primary {
		cards = append(cards,
			Card{Key: "PCOUNT", Value: int64(0)},
			Card{Key: "GCOUNT", Value: int64(1)})
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

// writeData writes big-endian values and zero padding to the end of the record.
func writeData(w *bufio.Writer, data any) error {
	var buf [8]byte
	n := 0
	put := func(b []byte) error {
		n += len(b)
		_, err := w.Write(b)
		return err
	}
	var err error
	switch d := data.(type) {
	case []byte:
		err = put(d)
	case []float32:
		for _, v := range d {
			binary.BigEndian.PutUint32(buf[:4], math.Float32bits(v))
			if err = put(buf[:4]); err != nil {
				return err
			}
		}
	case []float64:
		for _, v := range d {
			binary.BigEndian.PutUint64(buf[:8], math.Float64bits(v))
			if err = put(buf[:8]); err != nil {
				return err
			}
		}
	case []int16:
		for _, v := range d {
			binary.BigEndian.PutUint16(buf[:2], uint16(v))
			if err = put(buf[:2]); err != nil {
				return err
			}
		}
	case []int32:
		for _, v := range d {
			binary.BigEndian.PutUint32(buf[:4], uint32(v))
			if err = put(buf[:4]); err != nil {
				return err
			}
		}
	}
	if rem := n % blockLen; rem != 0 {
		_, err = w.Write(make([]byte, blockLen-rem))
	}
	return err
}

// WriteFile writes the HDUs to path atomically: to a temporary file in the same
// directory, synced to disk, then renamed over path, so that a reader never sees a
// half-written file.
func WriteFile(path string, hdus ...*HDU) error {
	err := atomicfile.Write(path, func(w io.Writer) error { return Write(w, hdus...) })
	if err != nil {
		return fmt.Errorf("fits: %w", err)
	}
	return nil
}

// ReadFile reads all HDUs of the FITS file at path.
func ReadFile(path string) ([]*HDU, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("fits: %w", err)
	}
	defer f.Close()
	hdus, err := Read(bufio.NewReaderSize(f, 1<<16))
	if err != nil {
		return nil, fmt.Errorf("%s: %w", path, err)
	}
	return hdus, nil
}

// Read reads every HDU up to the end of r. It refuses truncated or corrupt input,
// and HDUs other than a primary array and IMAGE and BINTABLE extensions, with an
// error. A table's heap (variable-length arrays) is skipped.
func Read(r io.Reader) ([]*HDU, error) {
	var hdus []*HDU
	for {
		var block [blockLen]byte
		n, err := io.ReadFull(r, block[:])
		if err == io.EOF && len(hdus) > 0 {
			return hdus, nil
		}
		if err != nil {
			if n == 0 && len(hdus) == 0 {
				return nil, errors.New("fits: empty input")
			}
			return nil, fmt.Errorf("fits: HDU %d: truncated header: %w", len(hdus), io.ErrUnexpectedEOF)
		}
		h, err := readHDU(r, block[:], len(hdus) == 0)
		if err != nil {
			return nil, fmt.Errorf("fits: HDU %d: %w", len(hdus), err)
		}
		hdus = append(hdus, h)
	}
}

// readHDU parses the header starting with first (one record already read) and the
// data that follows it.
func readHDU(r io.Reader, first []byte, primary bool) (*HDU, error) {
	var cards []Card
	block := first
	for done := false; !done; {
		for i := 0; i < blockLen; i += cardLen {
			raw := block[i : i+cardLen]
			if string(raw[:8]) == "END     " {
				done = true
				break
			}
			c, err := parseCard(raw)
			if err != nil {
				return nil, fmt.Errorf("card %d: %w", len(cards)+1, err)
			}
			cards = append(cards, c)
		}
		if done {
			break
		}
		block = make([]byte, blockLen)
		if _, err := io.ReadFull(r, block); err != nil {
			return nil, fmt.Errorf("header without END: %w", io.ErrUnexpectedEOF)
		}
	}
	h, pcount, err := structure(cards, primary)
	if err != nil {
		return nil, err
	}
	if h.Table != nil {
		if err := readTable(r, h.Table, pcount); err != nil {
			return nil, err
		}
		return h, nil
	}
	n := 1
	for _, a := range h.Axes {
		n *= a
	}
	if len(h.Axes) == 0 {
		n = 0
	}
	if err := readData(r, h, n); err != nil {
		return nil, err
	}
	return h, nil
}

// structure checks the mandatory keywords and moves the user keywords into the
// HDU's header. For a table it also returns PCOUNT, the size of its heap.
func structure(cards []Card, primary bool) (*HDU, int64, error) {
	h, ints, err := mandatory(cards, primary)
	if err != nil {
		return nil, 0, err
	}
	if !primary && cards[0].Value == "BINTABLE" {
		p := ints["PCOUNT"]
		if p < 0 || p > maxDataBytes {
			return nil, 0, fmt.Errorf("PCOUNT %d: out of range", p)
		}
		return h, p, tableStructure(h, ints)
	}
	if !primary {
		if p := ints["PCOUNT"]; p != 0 {
			return nil, 0, fmt.Errorf("PCOUNT %d: must be 0 for an IMAGE extension", p)
		}
		if g, ok := ints["GCOUNT"]; ok && g != 1 {
			return nil, 0, fmt.Errorf("GCOUNT %d: must be 1 for an IMAGE extension", g)
		}
	}
	return h, 0, nil
}

// mandatory parses the keywords common to every HDU.
func mandatory(cards []Card, primary bool) (*HDU, map[string]int64, error) {
	if len(cards) == 0 {
		return nil, nil, errors.New("empty header")
	}
	if primary {
		if cards[0].Key != "SIMPLE" || cards[0].Value != true {
			return nil, nil, errors.New("first keyword is not SIMPLE = T")
		}
	} else {
		if cards[0].Key != "XTENSION" {
			return nil, nil, errors.New("extension does not start with XTENSION")
		}
		if cards[0].Value != "IMAGE" && cards[0].Value != "BINTABLE" {
			return nil, nil, fmt.Errorf("XTENSION %v: only IMAGE and BINTABLE extensions are supported", cards[0].Value)
		}
	}
	ints := map[string]int64{}
	h := &HDU{}
	for _, c := range cards[1:] {
		if !structural(c.Key) {
			h.Header.Cards = append(h.Header.Cards, c)
			continue
		}
		switch c.Key {
		case "SIMPLE", "XTENSION", "END":
			return nil, nil, fmt.Errorf("keyword %s out of place", c.Key)
		case "EXTEND":
			continue
		}
		v, ok := c.Value.(int64)
		if !ok {
			return nil, nil, fmt.Errorf("keyword %s = %v: must be an integer", c.Key, c.Value)
		}
		if _, dup := ints[c.Key]; dup {
			return nil, nil, fmt.Errorf("keyword %s repeated", c.Key)
		}
		ints[c.Key] = v
	}
	bitpix, ok := ints["BITPIX"]
	if !ok {
		return nil, nil, errors.New("missing BITPIX")
	}
	if _, err := bytesPer(int(bitpix)); err != nil && bitpix != 8 {
		return nil, nil, err
	}
	h.Bitpix = int(bitpix)
	naxis, ok := ints["NAXIS"]
	if !ok {
		return nil, nil, errors.New("missing NAXIS")
	}
	if naxis < 0 || naxis > maxAxes {
		return nil, nil, fmt.Errorf("NAXIS %d: between 0 and %d axes are supported", naxis, maxAxes)
	}
	size := int64(1)
	for i := 1; i <= int(naxis); i++ {
		k := "NAXIS" + strconv.Itoa(i)
		a, ok := ints[k]
		if !ok {
			return nil, nil, fmt.Errorf("missing %s", k)
		}
		if a < 0 || a > math.MaxInt32 {
			return nil, nil, fmt.Errorf("%s %d: out of range", k, a)
		}
		size *= a
		if size > maxDataBytes {
			return nil, nil, fmt.Errorf("axes claim more than %d bytes of data", int64(maxDataBytes))
		}
		h.Axes = append(h.Axes, int(a))
	}
	for k := range ints {
		if rest, ok := strings.CutPrefix(k, "NAXIS"); ok && rest != "" {
			if i, _ := strconv.Atoi(rest); i > int(naxis) {
				return nil, nil, fmt.Errorf("%s present with NAXIS = %d", k, naxis)
			}
		}
	}
	if bitpix == 8 && (primary || cards[0].Value != "BINTABLE") {
		return nil, nil, errors.New("BITPIX 8: this package reads 8-bit data only in tables")
	}
	return h, ints, nil
}

// readChunk is how many bytes of data are read at a time. Data slices grow chunk by
// chunk, so a header that claims more data than the input holds fails at the end of
// the input instead of allocating the claimed size up front.
const readChunk = 1 << 16

func readData(r io.Reader, h *HDU, n int) error {
	if n == 0 {
		return nil
	}
	bp, _ := bytesPer(h.Bitpix)
	total := n * bp
	var f32 []float32
	var f64 []float64
	var i16 []int16
	var i32 []int32
	buf := make([]byte, min(total, readChunk))
	for done := 0; done < total; {
		b := buf[:min(len(buf), total-done)]
		if _, err := io.ReadFull(r, b); err != nil {
			return fmt.Errorf("data truncated after %d of %d bytes: %w", done, total, io.ErrUnexpectedEOF)
		}
		done += len(b)
		switch h.Bitpix {
		case -32:
			for j := 0; j < len(b); j += 4 {
				f32 = append(f32, math.Float32frombits(binary.BigEndian.Uint32(b[j:])))
			}
		case -64:
			for j := 0; j < len(b); j += 8 {
				f64 = append(f64, math.Float64frombits(binary.BigEndian.Uint64(b[j:])))
			}
		case 16:
			for j := 0; j < len(b); j += 2 {
				i16 = append(i16, int16(binary.BigEndian.Uint16(b[j:])))
			}
		case 32:
			for j := 0; j < len(b); j += 4 {
				i32 = append(i32, int32(binary.BigEndian.Uint32(b[j:])))
			}
		}
	}
	switch h.Bitpix {
	case -32:
		h.Data = f32
	case -64:
		h.Data = f64
	case 16:
		h.Data = i16
	case 32:
		h.Data = i32
	}
	if rem := total % blockLen; rem != 0 {
		pad := make([]byte, blockLen-rem)
		if _, err := io.ReadFull(r, pad); err != nil {
			return fmt.Errorf("data padding truncated: %w", io.ErrUnexpectedEOF)
		}
	}
	return nil
}
