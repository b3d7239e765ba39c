package pipeline

import (
	"context"
	"errors"
	"fmt"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/array"
)

// concatSource reads inputs one after another as one Source.
type concatSource struct {
	ins    []Input
	opt    SourceOptions
	schema *arrow.Schema
	meta   arrow.Metadata
	parts  []string // the first input's partition columns
	i      int      // index of cur in ins
	cur    Source   // nil once all are read or after an error
	rec    arrow.RecordBatch
	err    error
}

// Concat reads several inputs one after the other as one Source. Every
// input's schema (after projection and partition columns) must have the
// first's column names and types, else an *Error names both files and the
// first differing column. Schemas are checked before the first batch by
// opening each input once (for Parquet and Arrow files only the footer or
// header is read; CSV files are small by contract), so a mismatch fails the
// run before any output is written; standard input is checked when reached.
// A column is nullable in Schema if it is in any input; metadata is the
// first input's. Location reports the current file.
func Concat(ctx context.Context, ins []Input, opt SourceOptions) (Source, error) {
	if len(ins) == 0 {
		return nil, errors.New("no inputs to read")
	}
	first, err := Open(ctx, ins[0], opt)
	if err != nil {
		return nil, err
	}
	sc := first.Schema()
	fields := append([]arrow.Field(nil), sc.Fields()...)
	for _, in := range ins[1:] {
		if in.Path == Stdin {
			continue
		}
		other, err := peekSchema(ctx, in, opt)
		if err != nil {
			first.Close()
			return nil, err
		}
		if err := sameSchema(ins[0].Path, sc, in.Path, other); err != nil {
			first.Close()
			return nil, err
		}
		for k, f := range other.Fields() {
			fields[k].Nullable = fields[k].Nullable || f.Nullable
		}
	}
	s := &concatSource{ins: ins, opt: opt, cur: first}
	if ps, ok := first.(PartitionedSource); ok {
		s.parts = ps.PartitionColumns()
	}
	if m, ok := first.(MetadataSource); ok {
		s.meta = m.Metadata()
	}
	s.schema = arrow.NewSchema(fields, &s.meta)
	return s, nil
}

func peekSchema(ctx context.Context, in Input, opt SourceOptions) (*arrow.Schema, error) {
	src, err := Open(ctx, in, opt)
	if err != nil {
		return nil, err
	}
	sc := src.Schema()
	if err := src.Close(); err != nil {
		return nil, locate(err, in.Path, -1, "")
	}
	return sc, nil
}

// sameSchema compares column names and types in order, ignoring
// nullability and metadata.
func sameSchema(firstPath string, first *arrow.Schema, path string, sc *arrow.Schema) error {
	mismatch := func(col string, format string, args ...any) error {
		return &Error{File: path, RowGroup: -1, Row: -1, Column: col,
			Err: fmt.Errorf("schema differs from the first input %s: %s", firstPath, fmt.Sprintf(format, args...))}
	}
	a, b := first.Fields(), sc.Fields()
	for k := range min(len(a), len(b)) {
		switch {
		case a[k].Name != b[k].Name:
			return mismatch(b[k].Name, "column %d is %q here but %q there", k+1, b[k].Name, a[k].Name)
		case !arrow.TypeEqual(a[k].Type, b[k].Type):
			return mismatch(b[k].Name, "type %v here but %v there", b[k].Type, a[k].Type)
		}
	}
	switch {
	case len(b) > len(a):
		return mismatch(b[len(a)].Name, "column not in the first input")
	case len(a) > len(b):
		return mismatch(a[len(b)].Name, "column missing here")
	}
	return nil
}

func (s *concatSource) Schema() *arrow.Schema          { return s.schema }
func (s *concatSource) RecordBatch() arrow.RecordBatch { return s.rec }
func (s *concatSource) Err() error                     { return s.err }
func (s *concatSource) Metadata() arrow.Metadata       { return s.meta }
func (s *concatSource) PartitionColumns() []string     { return s.parts }

func (s *concatSource) Location() Location {
	if s.cur == nil {
		return Location{File: s.ins[min(s.i, len(s.ins)-1)].Path, RowGroup: -1, Row: -1}
	}
	return s.cur.Location()
}

func (s *concatSource) Next(ctx context.Context) bool {
	s.release()
	for s.cur != nil {
		if s.cur.Next(ctx) {
			rec := s.cur.RecordBatch()
			if rec.Schema().Equal(s.schema) {
				rec.Retain()
				s.rec = rec
			} else {
				// Same names and types, but nullability or metadata differ.
				s.rec = array.NewRecordBatch(s.schema, rec.Columns(), rec.NumRows())
			}
			return true
		}
		err := s.cur.Err()
		cerr := s.cur.Close()
		s.cur = nil
		if err == nil {
			err = cerr
		}
		if err != nil {
			s.err = locate(err, s.ins[s.i].Path, -1, "")
			return false
		}
		if s.i+1 >= len(s.ins) {
			s.i = len(s.ins)
			return false
		}
		s.i++
		in := s.ins[s.i]
		src, err := Open(ctx, in, s.opt)
		if err != nil {
			s.err = err
			return false
		}
		if err := sameSchema(s.ins[0].Path, s.schema, in.Path, src.Schema()); err != nil {
			src.Close()
			s.err = err
			return false
		}
		s.cur = src
	}
	return false
}

func (s *concatSource) release() {
	if s.rec != nil {
		s.rec.Release()
		s.rec = nil
	}
}

func (s *concatSource) Close() error {
	s.release()
	if s.cur == nil {
		return nil
	}
	err := s.cur.Close()
	s.cur = nil
	return err
}
