package pipeline

import (
	"errors"
	"fmt"
	"io/fs"
)

// ErrMalformed marks data the readers could not decode: a corrupt page, a
// truncated file, a footer that lies. It is wrapped in an *Error naming the
// place, so errors.Is(err, ErrMalformed) tells bad data from bad arguments.
var ErrMalformed = errors.New("malformed data")

// guard runs f and turns a panic inside it into an *Error for file wrapping
// ErrMalformed. The Arrow and Parquet decoders index slices straight from
// lengths stored in the file, so a damaged file can panic anywhere below
// them; every call into them goes through guard. An error returned by f is
// located at file unless it already is an *Error.
func guard(file string, f func() error) (err error) {
	defer func() {
		if r := recover(); r != nil {
			err = At(file, malformed(r))
		}
	}()
	if err := f(); err != nil {
		return locate(err, file, -1, "")
	}
	return nil
}

// malformed wraps a recovered panic value in ErrMalformed.
func malformed(r any) error {
	return fmt.Errorf("%w: decoder panic: %v", ErrMalformed, r)
}

// locate returns err as an *Error at file, filling in the row group and
// column where they are unknown. An *Error naming another file is wrapped,
// not rewritten, so the inner location survives.
func locate(err error, file string, rowGroup int, column string) error {
	if err == nil {
		return nil
	}
	var e *Error
	if errors.As(err, &e) && (e.File == file || e.File == "") {
		out := *e
		out.File = file
		if out.RowGroup < 0 {
			out.RowGroup = rowGroup
		}
		if out.Column == "" {
			out.Column = column
		}
		return &out
	}
	var pe *fs.PathError
	if errors.As(err, &pe) && pe.Path == file {
		// The Error already names the file; say it once.
		err = fmt.Errorf("%s: %w", pe.Op, pe.Err)
	}
	return &Error{File: file, RowGroup: rowGroup, Row: -1, Column: column, Err: err}
}
