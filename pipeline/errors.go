package pipeline

import (
	"fmt"
	"strings"
)

// Error locates a failure in the data: which file, row group, row and column.
// RowGroup and Row are -1 when unknown; Row counts from 0 within the file.
// It wraps the cause so errors.Is and errors.As reach it.
type Error struct {
	File     string
	RowGroup int
	Row      int64
	Column   string
	Err      error
}

// At returns an Error for file with the row group and row unknown.
func At(file string, err error) *Error {
	return &Error{File: file, RowGroup: -1, Row: -1, Err: err}
}

func (e *Error) Error() string {
	var b strings.Builder
	if e.File != "" {
		b.WriteString(e.File)
	}
	if e.RowGroup >= 0 {
		fmt.Fprintf(&b, ": row group %d", e.RowGroup)
	}
	if e.Row >= 0 {
		fmt.Fprintf(&b, ": row %d", e.Row)
	}
	if e.Column != "" {
		fmt.Fprintf(&b, ": column %q", e.Column)
	}
	if e.Err != nil {
		if b.Len() > 0 {
			b.WriteString(": ")
		}
		b.WriteString(e.Err.Error())
	}
	return b.String()
}

func (e *Error) Unwrap() error { return e.Err }
