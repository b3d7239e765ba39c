package fit

import (
	"bytes"
	"context"
	"encoding/binary"
	"errors"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/array"
	"github.com/apache/arrow-go/v18/arrow/memory"

	"github.com/heft-project/heft/pipeline"
)

// Decoding any bytes as a model file never panics; a file that loads
// writes back to bytes that load to the same checksum.
func FuzzModelUnmarshal(f *testing.F) {
	good, err := testModel().Marshal()
	if err != nil {
		f.Fatal(err)
	}
	f.Add(good)
	f.Add(good[:len(good)/2])
	f.Add(bytes.Replace(good, []byte(`"format_version": 1`), []byte(`"format_version": 2`), 1))
	f.Add([]byte(`{"format":"heft-model","format_version":1}`))
	f.Add([]byte(`null`))
	f.Fuzz(func(t *testing.T, b []byte) {
		m, err := Unmarshal(b)
		if err != nil {
			if m != nil {
				t.Fatal("a model and an error")
			}
			return
		}
		again, err := m.Marshal()
		if err != nil {
			t.Fatalf("a loaded model does not write: %v", err)
		}
		m2, err := Unmarshal(again)
		if err != nil {
			t.Fatalf("a written model does not load: %v", err)
		}
		if m2.Checksum != m.Checksum {
			t.Fatalf("checksum %s after a round trip, was %s", m2.Checksum, m.Checksum)
		}
	})
}

// fuzzSchema has testEncoding's columns in their fit types.
var fuzzSchema = arrow.NewSchema([]arrow.Field{
	{Name: "t", Type: arrow.PrimitiveTypes.Int64, Nullable: true},
	{Name: "y", Type: arrow.PrimitiveTypes.Float64, Nullable: true},
	{Name: "age", Type: arrow.PrimitiveTypes.Int64, Nullable: true},
	{Name: "inc", Type: arrow.PrimitiveTypes.Float64, Nullable: true},
	{Name: "reg", Type: arrow.BinaryTypes.String, Nullable: true},
	{Name: "vip", Type: arrow.FixedWidthTypes.Boolean, Nullable: true},
	{Name: "code", Type: arrow.PrimitiveTypes.Int16, Nullable: true},
}, nil)

// fuzzBatch turns bytes into rows of fuzzSchema: each row takes 12 bytes
// (a null mask, then the values), so any value, NaN and ±Inf included,
// appears in any column.
func fuzzBatch(mem memory.Allocator, b []byte) arrow.RecordBatch {
	rb := array.NewRecordBuilder(mem, fuzzSchema)
	defer rb.Release()
	levels := []string{"s", "e", "w", "n", "", "zz", "é"}
	for ; len(b) >= 12; b = b[12:] {
		null := b[0]
		v := math.Float64frombits(binary.LittleEndian.Uint64(b[1:9]))
		k := int64(int8(b[9]))
		app := func(j int, f func()) {
			if null&(1<<j) != 0 {
				rb.Field(j).AppendNull()
			} else {
				f()
			}
		}
		app(0, func() { rb.Field(0).(*array.Int64Builder).Append(k % 3) })
		app(1, func() { rb.Field(1).(*array.Float64Builder).Append(v) })
		app(2, func() { rb.Field(2).(*array.Int64Builder).Append(k * int64(b[10])) })
		app(3, func() { rb.Field(3).(*array.Float64Builder).Append(v) })
		app(4, func() { rb.Field(4).(*array.StringBuilder).Append(levels[int(b[10])%len(levels)]) })
		app(5, func() { rb.Field(5).(*array.BooleanBuilder).Append(b[11]&1 == 1) })
		app(6, func() { rb.Field(6).(*array.Int16Builder).Append(int16(b[11]) % 9) })
	}
	return rb.NewRecordBatch()
}

// Encoding any batch never panics: it either fails with a located error or
// gives finite terms for every row, under both unseen-level policies.
func FuzzEncode(f *testing.F) {
	row := func(null byte, v float64, k int8, lvl, bits byte) []byte {
		b := []byte{null}
		b = binary.LittleEndian.AppendUint64(b, math.Float64bits(v))
		return append(b, byte(k), lvl, bits)
	}
	f.Add(append(row(0, 1.5, 1, 0, 3), row(0, 2, 0, 1, 7)...))
	f.Add(append(row(0xff, 0, 0, 0, 0), row(0x08, math.NaN(), 2, 5, 1)...))
	f.Add(row(0, math.Inf(1), -1, 6, 2))
	f.Add(row(0x02, math.Inf(-1), 4, 3, 255))
	f.Add([]byte{})
	e := testEncoding()
	f.Fuzz(func(t *testing.T, data []byte) {
		mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
		defer mem.AssertSize(t, 0)
		rec := fuzzBatch(mem, data)
		defer rec.Release()
		for _, unseen := range []string{UnseenError, UnseenReference} {
			enc, err := e.Bind(rec.Schema(), "fuzz.parquet", true, unseen)
			if err != nil {
				t.Fatal(err)
			}
			var b Batch
			err = enc.Encode(rec, pipeline.Location{File: "fuzz.parquet", RowGroup: 0}, &b)
			if err != nil {
				var pe *pipeline.Error
				if !errors.As(err, &pe) || pe.File != "fuzz.parquet" || pe.Column == "" {
					t.Fatalf("error without its location: %v", err)
				}
				continue
			}
			if b.N != int(rec.NumRows()) || len(b.X) != enc.NumTerms() {
				t.Fatalf("N %d for %d rows, %d term columns", b.N, rec.NumRows(), len(b.X))
			}
			for j, x := range b.X {
				for i, v := range x[:b.N] {
					if math.IsNaN(v) || math.IsInf(v, 0) {
						t.Fatalf("term %d row %d is %v", j, i, v)
					}
				}
			}
		}
	})
}

// Reading any bytes as a CSV sample never panics: opening and sampling
// either fail with an error naming the file, or give a frame that Fit
// accepts or refuses with an error (never a panic).
func FuzzCSVSample(f *testing.F) {
	f.Add("t,x1,grp,y\n1,0.5,a,2\n0,-1,b,3\n1,2.5,a,\n0,,c,1\n")
	f.Add("t,x1,grp,y\n1,NaN,a,2\n0,inf,b,3\n")
	f.Add("t,x1,grp,y\n\"1\",\"0.5\",\"a,b\",2\n0,1e308,b,-1e308\n1,3,a,4,5\n")
	f.Add("\ufefft,x1,grp,y\ntrue,1,x,1\nfalse,2,y,0\n")
	f.Add("t,x1\n")
	f.Add("")
	f.Fuzz(func(t *testing.T, body string) {
		path := filepath.Join(t.TempDir(), "s.csv")
		if err := os.WriteFile(path, []byte(body), 0o644); err != nil {
			t.Fatal(err)
		}
		located := func(err error) {
			var pe *pipeline.Error
			if !errors.As(err, &pe) || pe.File != path {
				if !strings.Contains(err.Error(), "s.csv") && !strings.Contains(err.Error(), `"t"`) &&
					!strings.Contains(err.Error(), `"x1"`) && !strings.Contains(err.Error(), `"grp"`) {
					t.Fatalf("error names neither the file nor a column: %v", err)
				}
			}
		}
		ctx := context.Background()
		src, err := pipeline.Open(ctx, pipeline.Input{Path: path, Format: pipeline.FormatCSV}, pipeline.SourceOptions{BatchRows: 3})
		if err != nil {
			located(err)
			return
		}
		defer src.Close()
		so := SampleOptions{Treatment: "t", Covariates: []string{"x1", "grp"}, Outcome: "y", SampleRows: 5, Seed: 1}
		fr, err := ReadSample(ctx, src, so)
		if err != nil {
			located(err)
			return
		}
		if _, _, _, err := Fit(ctx, fr, Options{SampleOptions: so, MinLevel: 1, GLM: GLMOptions{Tol: 1e-8, MaxIter: 25}}); err != nil && err.Error() == "" {
			t.Fatal("an empty error")
		}
	})
}
