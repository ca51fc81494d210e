package ingest

import (
	"fmt"
	"strings"
)

// InputError reports bad input: a file that is not a readable table, a missing or
// unusable column, or a bad value. Its message is one line naming the file, and the
// column and row when they are known, for example
//
//	data.parquet: column "g7", row 1043: value is NaN
//
// Row is the 1-based data row (for CSV the first line after the header is row 1; rows
// dropped by Options.SkipInvalid still count), or 0 when the error is not about one
// row. Column is "" when the error is not about one column. Err, when non-nil, is the
// underlying error (from the operating system or the Arrow library) and is returned by
// Unwrap; its text is already folded into Reason.
type InputError struct {
	File, Column string
	Row          int64
	Reason       string
	Err          error
}

// Error returns the one-line message described on InputError.
func (e *InputError) Error() string {
	var b strings.Builder
	b.WriteString(e.File)
	sep := ": "
	if e.Column != "" {
		fmt.Fprintf(&b, "%scolumn %q", sep, e.Column)
		sep = ", "
	}
	if e.Row > 0 {
		fmt.Fprintf(&b, "%srow %d", sep, e.Row)
	}
	b.WriteString(": ")
	b.WriteString(oneLine(e.Reason))
	return b.String()
}

// Unwrap returns the underlying error, if any.
func (e *InputError) Unwrap() error { return e.Err }

// oneLine folds line breaks and tabs into single spaces so that messages taken from
// other libraries keep the one-line promise of InputError.
func oneLine(s string) string {
	if !strings.ContainsAny(s, "\r\n\t") {
		return s
	}
	return strings.Join(strings.Fields(s), " ")
}

func inputErr(file, column string, row int64, format string, args ...any) *InputError {
	return &InputError{File: file, Column: column, Row: row, Reason: fmt.Sprintf(format, args...)}
}

func wrapInputErr(file, column string, row int64, err error, format string, args ...any) *InputError {
	reason := fmt.Sprintf(format, args...)
	if err != nil {
		reason += ": " + err.Error()
	}
	return &InputError{File: file, Column: column, Row: row, Reason: reason, Err: err}
}
