package ingest

import (
	"errors"
	"strconv"
	"strings"
)

// csvSampleRows is the number of leading rows used to tell numeric CSV columns from
// text columns (and integer ids from text ids).
const csvSampleRows = 1000

// csvInfo describes what the sampled rows say about one CSV column.
type csvInfo struct {
	nonEmpty int
	numbers  int  // non-empty sampled values that parse as numbers
	integer  bool // every non-empty sampled value is a canonical int64
}

// numeric tells whether the column counts as numeric: at least half of its non-empty
// sampled values are numbers. The others are then bad values (reported with their
// row, or dropped with SkipInvalid) rather than making the column text.
func (in csvInfo) numeric() bool { return in.nonEmpty > 0 && 2*in.numbers >= in.nonEmpty }

// parseNumber parses a CSV number, rounded once, correctly, to float32 (parsing to
// float64 first could round twice). Values beyond float32's range give ±Inf. Only
// decimal syntax is a number (see decimalSyntax).
func parseNumber(s string) (float64, bool) {
	s = strings.TrimSpace(s)
	if !decimalSyntax(s) {
		return 0, false
	}
	v, err := strconv.ParseFloat(s, 32)
	if err != nil {
		var ne *strconv.NumError
		if errors.As(err, &ne) && ne.Err == strconv.ErrRange {
			return v, true // ±Inf for values beyond float32's range
		}
		return 0, false
	}
	return v, true
}

// finiteText reports whether a number's text is finite (not NaN or Inf), so
// that an infinite value parsed from it overflowed float32.
func finiteText(s string) bool {
	s = strings.TrimLeft(strings.TrimSpace(s), "+-")
	return s != "" && s[0]|0x20 != 'n' && s[0]|0x20 != 'i'
}

// decimalSyntax reports whether s is a decimal number as spreadsheets and data
// tools write them — [sign] digits [. digits] [e|E [sign] digits], with at least
// one digit before or after the point — or, in any case, [sign] NaN, Inf or
// Infinity. It rules out what strconv.ParseFloat accepts beyond that: hexadecimal
// floats ("0x1p3") and underscores between digits ("1_000").
func decimalSyntax(s string) bool {
	i := 0
	if i < len(s) && (s[i] == '+' || s[i] == '-') {
		i++
	}
	if t := s[i:]; len(t) > 0 && (t[0]|0x20 == 'n' || t[0]|0x20 == 'i') {
		return strings.EqualFold(t, "nan") || strings.EqualFold(t, "inf") || strings.EqualFold(t, "infinity")
	}
	digits := 0
	for i < len(s) && s[i] >= '0' && s[i] <= '9' {
		i++
		digits++
	}
	if i < len(s) && s[i] == '.' {
		i++
		for i < len(s) && s[i] >= '0' && s[i] <= '9' {
			i++
			digits++
		}
	}
	if digits == 0 {
		return false
	}
	if i < len(s) && (s[i] == 'e' || s[i] == 'E') {
		i++
		if i < len(s) && (s[i] == '+' || s[i] == '-') {
			i++
		}
		exp := 0
		for i < len(s) && s[i] >= '0' && s[i] <= '9' {
			i++
			exp++
		}
		if exp == 0 {
			return false
		}
	}
	return i == len(s)
}

func parseCanonicalInt(s string) (int64, bool) {
	s = strings.TrimSpace(s)
	v, err := strconv.ParseInt(s, 10, 64)
	if err != nil || strconv.FormatInt(v, 10) != s {
		return 0, false
	}
	return v, true
}
