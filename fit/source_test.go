package fit

import (
	"context"
	"fmt"
	"testing"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/array"
	"github.com/apache/arrow-go/v18/arrow/float16"
	"github.com/apache/arrow-go/v18/arrow/memory"

	"github.com/heft-project/heft/pipeline"
)

// memSource is a pipeline.Source over batches built in memory; every batch
// is its own row group of file "mem.parquet".
type memSource struct {
	schema *arrow.Schema
	recs   []arrow.RecordBatch
	i      int
	row    int64
	loc    pipeline.Location
}

func newMemSource(recs ...arrow.RecordBatch) *memSource {
	return &memSource{schema: recs[0].Schema(), recs: recs, i: -1, loc: pipeline.Location{File: "mem.parquet", RowGroup: -1}}
}

func (s *memSource) Schema() *arrow.Schema { return s.schema }
func (s *memSource) Next(ctx context.Context) bool {
	if ctx.Err() != nil {
		return false
	}
	if s.i >= 0 {
		s.row += s.recs[s.i].NumRows()
	}
	s.i++
	if s.i >= len(s.recs) {
		return false
	}
	s.loc = pipeline.Location{File: "mem.parquet", RowGroup: s.i, Row: s.row}
	return true
}
func (s *memSource) RecordBatch() arrow.RecordBatch { return s.recs[s.i] }
func (s *memSource) Location() pipeline.Location    { return s.loc }
func (s *memSource) Err() error                     { return nil }
func (s *memSource) Close() error {
	for _, r := range s.recs {
		r.Release()
	}
	return nil
}

// col is one test column: its Arrow type and values (nil = null). Values
// are float64, int64, string or bool as the type needs.
type col struct {
	name string
	typ  arrow.DataType
	vals []any
}

// mkBatch builds a record batch from columns of equal length.
func mkBatch(t testing.TB, mem memory.Allocator, cols ...col) arrow.RecordBatch {
	t.Helper()
	fields := make([]arrow.Field, len(cols))
	for i, c := range cols {
		fields[i] = arrow.Field{Name: c.name, Type: c.typ, Nullable: true}
	}
	schema := arrow.NewSchema(fields, nil)
	b := array.NewRecordBuilder(mem, schema)
	defer b.Release()
	for i, c := range cols {
		fb := b.Field(i)
		for _, v := range c.vals {
			if v == nil {
				fb.AppendNull()
				continue
			}
			if err := appendValue(fb, v); err != nil {
				t.Fatalf("column %s: %v", c.name, err)
			}
		}
	}
	return b.NewRecordBatch()
}

func appendValue(fb array.Builder, v any) error {
	switch b := fb.(type) {
	case *array.Float64Builder:
		b.Append(v.(float64))
	case *array.Float32Builder:
		b.Append(float32(v.(float64)))
	case *array.Int64Builder:
		b.Append(int64(v.(int)))
	case *array.Int32Builder:
		b.Append(int32(v.(int)))
	case *array.Int16Builder:
		b.Append(int16(v.(int)))
	case *array.Int8Builder:
		b.Append(int8(v.(int)))
	case *array.Uint8Builder:
		b.Append(uint8(v.(int)))
	case *array.Uint32Builder:
		b.Append(uint32(v.(int)))
	case *array.Uint64Builder:
		b.Append(uint64(v.(int)))
	case *array.Float16Builder:
		b.Append(float16.New(float32(v.(float64))))
	case *array.StringViewBuilder:
		b.Append(v.(string))
	case *array.StringBuilder:
		b.Append(v.(string))
	case *array.LargeStringBuilder:
		b.Append(v.(string))
	case *array.BooleanBuilder:
		b.Append(v.(bool))
	case *array.BinaryDictionaryBuilder:
		return b.AppendString(v.(string))
	default:
		return fmt.Errorf("no test builder for %T", fb)
	}
	return nil
}

var dictString = &arrow.DictionaryType{IndexType: arrow.PrimitiveTypes.Int32, ValueType: arrow.BinaryTypes.String}

func anys(v ...any) []any { return v }
