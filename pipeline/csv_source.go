package pipeline

import (
	"bufio"
	"context"
	"encoding/csv"
	"errors"
	"fmt"
	"io"
	"os"
	"strconv"
	"strings"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/array"
	"github.com/apache/arrow-go/v18/arrow/memory"
)

// csvSource reads a CSV file with a header line. CSV is for small samples:
// the whole file is read into memory at Open, so that each column's type
// can be inferred from every value, not a guess from the first rows:
//
//   - int64 if every non-empty value is a base-10 integer;
//   - else float64 if every one parses as a float (NaN, Inf, +Inf, -Inf and
//     Infinity in any case included);
//   - else bool if every one is true or false (any case);
//   - else utf8. A column with no values at all is utf8.
//
// Numbers and booleans may have surrounding spaces. An empty cell is null.
// SourceOptions.CSVTypes overrides the inference per column (int64, int32,
// float64, float32, bool, utf8, large utf8). Location().RowGroup is -1 and
// Row counts data rows from 0; errors also give the 1-based line.
type csvSource struct {
	path   string
	mem    memory.Allocator
	batch  int64
	idx    []int // projected columns
	schema *arrow.Schema
	rows   [][]string
	lines  []int // line of each row's first field

	next int64
	cur  arrow.RecordBatch
	loc  Location
	err  error
}

func openCSV(path string, p *projection, opt SourceOptions) (Source, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, locate(err, path, -1, "")
	}
	defer f.Close()
	r := csv.NewReader(bufio.NewReaderSize(f, 1<<16))
	header, err := r.Read()
	if errors.Is(err, io.EOF) {
		return nil, At(path, errors.New("empty CSV file: want a header line"))
	}
	if err != nil {
		return nil, csvError(path, -1, "", err)
	}
	header[0] = strings.TrimPrefix(header[0], "\ufeff")
	for i, h := range header {
		if h == "" {
			return nil, At(path, fmt.Errorf("line 1: column %d has an empty name", i+1))
		}
	}
	s := &csvSource{path: path, mem: opt.alloc(), batch: opt.batchRows(), loc: Location{File: path, RowGroup: -1}}
	for {
		rec, err := r.Read()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			return nil, csvError(path, int64(len(s.rows)), "", err)
		}
		line, _ := r.FieldPos(0)
		s.rows = append(s.rows, rec)
		s.lines = append(s.lines, line)
	}
	for name := range opt.CSVTypes {
		if !contains(header, name) {
			return nil, &Error{File: path, RowGroup: -1, Row: -1, Column: name, Err: errors.New("type override names no column of the file")}
		}
	}
	fields := make([]arrow.Field, len(header))
	for j, name := range header {
		t, ok := opt.CSVTypes[name]
		if ok {
			if !csvTypeSupported(t) {
				return nil, &Error{File: path, RowGroup: -1, Row: -1, Column: name, Err: fmt.Errorf("CSV columns cannot be read as %v", t)}
			}
		} else {
			t = inferCSV(s.rows, j)
		}
		fields[j] = arrow.Field{Name: name, Type: t, Nullable: true}
	}
	full := arrow.NewSchema(fields, nil)
	if s.idx, err = p.resolve(full); err != nil {
		return nil, err
	}
	s.schema = projectSchema(full, s.idx, arrow.Metadata{})
	return s, nil
}

func contains(xs []string, x string) bool {
	for _, y := range xs {
		if y == x {
			return true
		}
	}
	return false
}

// csvError locates an encoding/csv error, which knows its line and column.
func csvError(path string, row int64, col string, err error) error {
	var pe *csv.ParseError
	if errors.As(err, &pe) {
		return &Error{File: path, RowGroup: -1, Row: row, Column: col, Err: fmt.Errorf("line %d, field %d: %w", pe.Line, pe.Column, pe.Err)}
	}
	return &Error{File: path, RowGroup: -1, Row: row, Column: col, Err: err}
}

func csvTypeSupported(t arrow.DataType) bool {
	switch t.ID() {
	case arrow.INT64, arrow.INT32, arrow.FLOAT64, arrow.FLOAT32, arrow.BOOL, arrow.STRING, arrow.LARGE_STRING:
		return true
	}
	return false
}

func inferCSV(rows [][]string, j int) arrow.DataType {
	allInt, allFloat, allBool, seen := true, true, true, false
	for _, rec := range rows {
		v := strings.TrimSpace(rec[j])
		if rec[j] == "" {
			continue
		}
		seen = true
		if allInt {
			if _, err := strconv.ParseInt(v, 10, 64); err != nil {
				allInt = false
			}
		}
		if allFloat && !allInt {
			if _, err := parseFloat(v, 64); err != nil {
				allFloat = false
			}
		}
		if allBool {
			if _, err := parseBool(v); err != nil {
				allBool = false
			}
		}
		if !allInt && !allFloat && !allBool {
			break
		}
	}
	switch {
	case !seen:
		return arrow.BinaryTypes.String
	case allInt:
		return arrow.PrimitiveTypes.Int64
	case allFloat:
		return arrow.PrimitiveTypes.Float64
	case allBool:
		return arrow.FixedWidthTypes.Boolean
	}
	return arrow.BinaryTypes.String
}

// parseFloat is strconv.ParseFloat that takes out-of-range values as the
// infinities they round to, and rejects hexadecimal and underscore forms a
// CSV writer would not produce.
func parseFloat(v string, bits int) (float64, error) {
	if strings.ContainsAny(v, "xX_") {
		return 0, fmt.Errorf("cannot parse %q as a number", v)
	}
	x, err := strconv.ParseFloat(v, bits)
	if err != nil && errors.Is(err, strconv.ErrRange) {
		err = nil
	}
	return x, err
}

func parseBool(v string) (bool, error) {
	switch {
	case strings.EqualFold(v, "true"):
		return true, nil
	case strings.EqualFold(v, "false"):
		return false, nil
	}
	return false, fmt.Errorf("cannot parse %q as true or false", v)
}

func (s *csvSource) Schema() *arrow.Schema          { return s.schema }
func (s *csvSource) RecordBatch() arrow.RecordBatch { return s.cur }
func (s *csvSource) Location() Location             { return s.loc }
func (s *csvSource) Err() error                     { return s.err }

func (s *csvSource) Next(ctx context.Context) bool {
	s.release()
	if s.err != nil || s.next >= int64(len(s.rows)) {
		return false
	}
	if err := ctx.Err(); err != nil {
		s.err = At(s.path, err)
		return false
	}
	lo := s.next
	hi := min(lo+s.batch, int64(len(s.rows)))
	cols := make([]arrow.Array, len(s.idx))
	for i, j := range s.idx {
		a, err := s.column(j, s.schema.Field(i), lo, hi)
		if err != nil {
			for _, c := range cols[:i] {
				c.Release()
			}
			s.err = err
			return false
		}
		cols[i] = a
	}
	s.cur = array.NewRecordBatch(s.schema, cols, hi-lo)
	for _, c := range cols {
		c.Release()
	}
	s.loc = Location{File: s.path, RowGroup: -1, Row: lo}
	s.next = hi
	return true
}

// column builds rows [lo, hi) of CSV column j as field f's type.
func (s *csvSource) column(j int, f arrow.Field, lo, hi int64) (arrow.Array, error) {
	b := array.NewBuilder(s.mem, f.Type)
	defer b.Release()
	b.Reserve(int(hi - lo))
	for r := lo; r < hi; r++ {
		raw := s.rows[r][j]
		v := strings.TrimSpace(raw)
		if raw == "" || (v == "" && f.Type.ID() != arrow.STRING && f.Type.ID() != arrow.LARGE_STRING) {
			b.AppendNull()
			continue
		}
		var err error
		switch b := b.(type) {
		case *array.Int64Builder:
			var x int64
			if x, err = strconv.ParseInt(v, 10, 64); err == nil {
				b.Append(x)
			}
		case *array.Int32Builder:
			var x int64
			if x, err = strconv.ParseInt(v, 10, 32); err == nil {
				b.Append(int32(x))
			}
		case *array.Float64Builder:
			var x float64
			if x, err = parseFloat(v, 64); err == nil {
				b.Append(x)
			}
		case *array.Float32Builder:
			var x float64
			if x, err = parseFloat(v, 32); err == nil {
				b.Append(float32(x))
			}
		case *array.BooleanBuilder:
			var x bool
			if x, err = parseBool(v); err == nil {
				b.Append(x)
			}
		case *array.StringBuilder:
			b.Append(raw)
		case *array.LargeStringBuilder:
			b.Append(raw)
		default:
			err = fmt.Errorf("CSV columns cannot be read as %v", f.Type)
		}
		if err != nil {
			return nil, &Error{File: s.path, RowGroup: -1, Row: r, Column: f.Name, Err: fmt.Errorf("line %d: %w", s.lines[r], err)}
		}
	}
	return b.NewArray(), nil
}

func (s *csvSource) release() {
	if s.cur != nil {
		s.cur.Release()
		s.cur = nil
	}
}

func (s *csvSource) Close() error {
	s.release()
	s.rows, s.lines = nil, nil
	return nil
}
