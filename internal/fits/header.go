package fits

import (
	"fmt"
	"math"
	"strconv"
	"strings"
)

// Card is one header keyword. Value is a string, bool, int64 or float64, or nil for
// commentary keywords (COMMENT, HISTORY, blank) and keywords with an undefined value.
// For commentary keywords Comment holds the text.
type Card struct {
	Key     string
	Value   any
	Comment string
}

// Header is the ordered list of user keywords of an HDU. Structural keywords
// (SIMPLE, BITPIX, NAXIS, NAXISn, EXTEND, XTENSION, PCOUNT, GCOUNT, END) are not
// stored here: Write produces them from the HDU and Read consumes them.
type Header struct {
	Cards []Card
}

// commentary reports whether key is a commentary keyword, which carries text and no
// value and may appear any number of times (FITS Standard 4.0, §4.4.2.4).
func commentary(key string) bool {
	return key == "COMMENT" || key == "HISTORY" || key == ""
}

// structural reports whether key is written by the package from the HDU itself.
func structural(key string) bool {
	switch key {
	case "SIMPLE", "BITPIX", "NAXIS", "EXTEND", "XTENSION", "PCOUNT", "GCOUNT", "END":
		return true
	}
	if rest, ok := strings.CutPrefix(key, "NAXIS"); ok {
		_, err := strconv.Atoi(rest)
		return err == nil
	}
	return false
}

// normalize converts the Go numeric types a caller is likely to pass to the four
// stored kinds, so that Get returns what Set stored in a predictable type.
func normalize(v any) any {
	switch x := v.(type) {
	case int:
		return int64(x)
	case int8:
		return int64(x)
	case int16:
		return int64(x)
	case int32:
		return int64(x)
	case uint8:
		return int64(x)
	case uint16:
		return int64(x)
	case uint32:
		return int64(x)
	case float32:
		return float64(x)
	}
	return v
}

// Set replaces the value and comment of the first card named key, or appends a new
// card. Keys are upper-cased. Commentary keys (COMMENT, HISTORY, blank) always append,
// with comment as their text and value ignored. Values of the other Go integer and
// float types are stored as int64 and float64; anything Write cannot encode is
// reported by Write.
func (h *Header) Set(key string, value any, comment string) {
	key = strings.ToUpper(key)
	if commentary(key) {
		h.Cards = append(h.Cards, Card{Key: key, Comment: comment})
		return
	}
	value = normalize(value)
	for i := range h.Cards {
		if h.Cards[i].Key == key {
			h.Cards[i].Value = value
			h.Cards[i].Comment = comment
			return
		}
	}
	h.Cards = append(h.Cards, Card{Key: key, Value: value, Comment: comment})
}

// Get returns the value of the first card named key (upper-cased).
func (h *Header) Get(key string) (any, bool) {
	key = strings.ToUpper(key)
	for _, c := range h.Cards {
		if c.Key == key {
			return c.Value, true
		}
	}
	return nil, false
}

// String returns the value of key if it is a string.
func (h *Header) String(key string) (string, bool) {
	v, _ := h.Get(key)
	s, ok := v.(string)
	return s, ok
}

// Int returns the value of key if it is an integer.
func (h *Header) Int(key string) (int64, bool) {
	v, _ := h.Get(key)
	i, ok := v.(int64)
	return i, ok
}

// Float returns the value of key if it is a float, or an integer converted to float.
func (h *Header) Float(key string) (float64, bool) {
	v, _ := h.Get(key)
	switch x := v.(type) {
	case float64:
		return x, true
	case int64:
		return float64(x), true
	}
	return 0, false
}

// Comments returns the texts of the commentary cards named key (COMMENT or HISTORY),
// in order.
func (h *Header) Comments(key string) []string {
	key = strings.ToUpper(key)
	var out []string
	for _, c := range h.Cards {
		if c.Key == key && commentary(key) {
			out = append(out, c.Comment)
		}
	}
	return out
}

const cardLen = 80

// validKey checks a keyword name: up to 8 characters from A–Z, 0–9, '-' and '_'
// (FITS Standard 4.0, §4.1.2.1).
func validKey(key string) error {
	if len(key) > 8 {
		return fmt.Errorf("fits: keyword %q: longer than 8 characters", key)
	}
	for _, r := range key {
		if !(r >= 'A' && r <= 'Z' || r >= '0' && r <= '9' || r == '-' || r == '_') {
			return fmt.Errorf("fits: keyword %q: only A-Z, 0-9, '-' and '_' are allowed", key)
		}
	}
	return nil
}

// printable checks that s holds only the ASCII text characters 0x20–0x7E that header
// cards may contain (FITS Standard 4.0, §4.1.1).
func printable(s string) bool {
	for i := 0; i < len(s); i++ {
		if s[i] < 0x20 || s[i] > 0x7e {
			return false
		}
	}
	return true
}

// formatValue renders a value in fixed format: strings start in column 11 and are
// padded to at least 8 characters; other values are right-justified to column 30
// (FITS Standard 4.0, §4.2).
func formatValue(key string, v any) (string, error) {
	switch x := v.(type) {
	case nil:
		return "", nil
	case string:
		if !printable(x) {
			return "", fmt.Errorf("fits: keyword %s: string value holds non-printable characters", key)
		}
		s := strings.ReplaceAll(x, "'", "''")
		if len(s) < 8 {
			s += strings.Repeat(" ", 8-len(s))
		}
		s = "'" + s + "'"
		if len(s) > cardLen-10 {
			return "", fmt.Errorf("fits: keyword %s: string value of %d characters does not fit one card (long strings are not supported)", key, len(x))
		}
		return s, nil
	case bool:
		if x {
			return fmt.Sprintf("%20s", "T"), nil
		}
		return fmt.Sprintf("%20s", "F"), nil
	case int64:
		return fmt.Sprintf("%20d", x), nil
	case float64:
		if math.IsNaN(x) || math.IsInf(x, 0) {
			return "", fmt.Errorf("fits: keyword %s: value %g cannot be written in a header", key, x)
		}
		return fmt.Sprintf("%20s", formatFloat(x)), nil
	}
	return "", fmt.Errorf("fits: keyword %s: value of type %T: must be string, bool, int64 or float64", key, v)
}

// formatFloat gives the shortest decimal that reads back to the same float64, with a
// decimal point and an exponent so that no reader mistakes it for an integer.
func formatFloat(x float64) string {
	s := strconv.FormatFloat(x, 'E', -1, 64)
	mant, exp, _ := strings.Cut(s, "E")
	if !strings.Contains(mant, ".") {
		mant += ".0"
	}
	return mant + "E" + exp
}

// appendCards renders c as one or more 80-character cards. A commentary text longer
// than one card continues on further cards of the same keyword; the comment of a
// value card is cut at the end of the card.
func appendCards(dst []byte, c Card) ([]byte, error) {
	if err := validKey(c.Key); err != nil {
		return dst, err
	}
	if !printable(c.Comment) {
		return dst, fmt.Errorf("fits: keyword %s: comment holds non-printable characters", c.Key)
	}
	if commentary(c.Key) {
		text := c.Comment
		for {
			n := min(len(text), cardLen-8)
			dst = appendPadded(dst, fmt.Sprintf("%-8s%s", c.Key, text[:n]))
			text = text[n:]
			if text == "" {
				return dst, nil
			}
		}
	}
	val, err := formatValue(c.Key, c.Value)
	if err != nil {
		return dst, err
	}
	line := fmt.Sprintf("%-8s= %s", c.Key, val)
	if c.Comment != "" && len(line)+3 < cardLen {
		line += " / " + c.Comment
	}
	if len(line) > cardLen {
		line = line[:cardLen]
	}
	return appendPadded(dst, line), nil
}

func appendPadded(dst []byte, line string) []byte {
	dst = append(dst, line...)
	for i := len(line); i < cardLen; i++ {
		dst = append(dst, ' ')
	}
	return dst
}

// parseCard splits an 80-byte card into keyword, value and comment.
func parseCard(b []byte) (Card, error) {
	key := strings.TrimRight(string(b[:8]), " ")
	if !printable(string(b)) {
		return Card{}, fmt.Errorf("keyword %q: card holds non-printable bytes", key)
	}
	if commentary(key) || string(b[8:10]) != "= " {
		return Card{Key: key, Comment: strings.TrimRight(string(b[8:]), " ")}, nil
	}
	rest := string(b[10:])
	trimmed := strings.TrimLeft(rest, " ")
	var value any
	var after string
	if strings.HasPrefix(trimmed, "'") {
		s, tail, err := parseString(trimmed)
		if err != nil {
			return Card{}, fmt.Errorf("keyword %s: %w", key, err)
		}
		value, after = s, tail
	} else {
		tok, tail, _ := strings.Cut(trimmed, "/")
		tok = strings.TrimSpace(tok)
		v, err := parseScalar(tok)
		if err != nil {
			return Card{}, fmt.Errorf("keyword %s: %w", key, err)
		}
		value = v
		if strings.Contains(trimmed, "/") {
			after = "/" + tail
		}
	}
	after = strings.TrimSpace(after)
	comment := ""
	if after != "" {
		c, ok := strings.CutPrefix(after, "/")
		if !ok {
			return Card{}, fmt.Errorf("keyword %s: unexpected text %q after the value", key, after)
		}
		comment = strings.TrimSpace(c)
	}
	return Card{Key: key, Value: value, Comment: comment}, nil
}

// parseString reads a quoted string that starts at s[0]; a doubled quote stands
// for one quote and trailing spaces are not significant (FITS Standard 4.0, §4.2.1).
func parseString(s string) (string, string, error) {
	var out strings.Builder
	for i := 1; i < len(s); i++ {
		if s[i] != '\'' {
			out.WriteByte(s[i])
			continue
		}
		if i+1 < len(s) && s[i+1] == '\'' {
			out.WriteByte('\'')
			i++
			continue
		}
		return strings.TrimRight(out.String(), " "), s[i+1:], nil
	}
	return "", "", fmt.Errorf("string value without a closing quote")
}

// parseScalar reads a logical, integer or float value; an empty field is an
// undefined value.
func parseScalar(tok string) (any, error) {
	switch tok {
	case "":
		return nil, nil
	case "T":
		return true, nil
	case "F":
		return false, nil
	}
	isFloat := false
	for i := 0; i < len(tok); i++ {
		switch c := tok[i]; {
		case c >= '0' && c <= '9', c == '+', c == '-':
		case c == '.', c == 'E', c == 'e', c == 'D', c == 'd':
			isFloat = true
		default:
			return nil, fmt.Errorf("value %q: not a logical, integer or float", tok)
		}
	}
	if !isFloat {
		i, err := strconv.ParseInt(tok, 10, 64)
		if err != nil {
			return nil, fmt.Errorf("value %q: %w", tok, err)
		}
		return i, nil
	}
	f, err := strconv.ParseFloat(strings.NewReplacer("D", "E", "d", "E").Replace(tok), 64)
	if err != nil {
		return nil, fmt.Errorf("value %q: %w", tok, err)
	}
	return f, nil
}
