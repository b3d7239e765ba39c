package score

import (
	"strings"
	"testing"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/array"
	"github.com/apache/arrow-go/v18/arrow/memory"
	"github.com/heft-project/heft/fit"
)

// inputBatch builds a record with an int64 id, a utf8 name and a trailing
// utf8 partition column "dt".
func inputBatch(mem memory.Allocator, n int) arrow.RecordBatch {
	schema := arrow.NewSchema([]arrow.Field{
		{Name: "id", Type: arrow.PrimitiveTypes.Int64},
		{Name: "name", Type: arrow.BinaryTypes.String, Nullable: true},
		{Name: "dt", Type: arrow.BinaryTypes.String},
	}, nil)
	b := array.NewRecordBuilder(mem, schema)
	defer b.Release()
	for i := 0; i < n; i++ {
		b.Field(0).(*array.Int64Builder).Append(int64(i))
		if i%3 == 0 {
			b.Field(1).AppendNull()
		} else {
			b.Field(1).(*array.StringBuilder).Append("r")
		}
		b.Field(2).(*array.StringBuilder).Append("2026-06-01")
	}
	return b.NewRecordBatch()
}

func scoresOf(n int, predictions bool) *Scores {
	s := &Scores{N: n, E: make([]float64, n), W: make([]float64, n), WValid: make([]bool, n), InSupport: make([]bool, n)}
	for i := 0; i < n; i++ {
		s.E[i] = float64(i+1) / float64(n+2)
		s.W[i] = 1 / s.E[i]
		s.WValid[i] = i%4 != 1
		s.InSupport[i] = i%5 != 2
	}
	if predictions {
		s.Mu0, s.Mu1 = make([]float64, n), make([]float64, n)
		for i := range s.Mu0 {
			s.Mu0[i], s.Mu1[i] = float64(i), -float64(i)
		}
	}
	return s
}

func TestAppend(t *testing.T) {
	for _, c := range []struct {
		n           int
		keep        int
		predictions bool
		allValid    bool
	}{{11, 2, false, false}, {70, 0, true, false}, {9, 3, false, true}, {0, 2, true, false}} {
		mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
		rec := inputBatch(mem, c.n)
		keep := c.keep
		if keep == 0 {
			keep = 3
		}
		cols := DefaultColumns()
		cols.Predictions = c.predictions
		schema, err := OutputSchema(arrow.NewSchema(rec.Schema().Fields()[:keep], nil), cols, arrow.Metadata{})
		if err != nil {
			t.Fatal(err)
		}
		sc := scoresOf(c.n, c.predictions)
		if c.allValid {
			for i := range sc.WValid {
				sc.WValid[i] = true
			}
		}
		out := Append(mem, schema, rec, c.keep, sc, cols)
		if int(out.NumCols()) != keep+len(cols.appended()) || out.NumRows() != int64(c.n) {
			t.Fatalf("%+v: got %d columns, %d rows", c, out.NumCols(), out.NumRows())
		}
		for i := 0; i < keep; i++ {
			if out.Column(i) != rec.Column(i) {
				t.Errorf("%+v: column %d was copied, want the input array itself", c, i)
			}
		}
		e := out.Column(keep).(*array.Float64)
		w := out.Column(keep + 1).(*array.Float64)
		in := out.Column(keep + 2).(*array.Boolean)
		if e.NullN() != 0 || in.NullN() != 0 {
			t.Errorf("%+v: propensity or in_support has nulls", c)
		}
		if c.allValid && w.Data().Buffers()[0] != nil {
			t.Errorf("%+v: weight has a validity bitmap though no weight is null", c)
		}
		for i := 0; i < c.n; i++ {
			if e.Value(i) != sc.E[i] || in.Value(i) != sc.InSupport[i] || w.IsValid(i) != sc.WValid[i] || (sc.WValid[i] && w.Value(i) != sc.W[i]) {
				t.Errorf("%+v row %d: e %v w %v(valid %v) in %v, want %v %v(%v) %v", c, i,
					e.Value(i), w.Value(i), w.IsValid(i), in.Value(i), sc.E[i], sc.W[i], sc.WValid[i], sc.InSupport[i])
			}
			if c.predictions {
				m0, m1 := out.Column(keep+3).(*array.Float64), out.Column(keep+4).(*array.Float64)
				if m0.Value(i) != sc.Mu0[i] || m1.Value(i) != sc.Mu1[i] {
					t.Errorf("%+v row %d: mu0, mu1 wrong", c, i)
				}
			}
		}
		out.Release()
		rec.Release()
		mem.AssertSize(t, 0)
	}
}

func TestOutputSchema(t *testing.T) {
	in := arrow.NewSchema([]arrow.Field{
		{Name: "a", Type: arrow.PrimitiveTypes.Int32, Nullable: true, Metadata: arrow.NewMetadata([]string{"k"}, []string{"v"})},
		{Name: "b", Type: arrow.BinaryTypes.String},
	}, nil)
	meta := arrow.NewMetadata([]string{"heft.version"}, []string{"test"})
	c := DefaultColumns()
	c.Predictions = true
	s, err := OutputSchema(in, c, meta)
	if err != nil {
		t.Fatal(err)
	}
	want := []arrow.Field{
		in.Field(0), in.Field(1),
		{Name: "propensity", Type: arrow.PrimitiveTypes.Float64},
		{Name: "weight", Type: arrow.PrimitiveTypes.Float64, Nullable: true},
		{Name: "in_support", Type: arrow.FixedWidthTypes.Boolean},
		{Name: "mu0", Type: arrow.PrimitiveTypes.Float64},
		{Name: "mu1", Type: arrow.PrimitiveTypes.Float64},
	}
	if !s.Equal(arrow.NewSchema(want, nil)) || !s.Field(0).Equal(in.Field(0)) {
		t.Errorf("schema\n%v\nwant fields\n%v", s, want)
	}
	if v, _ := s.Metadata().GetValue("heft.version"); v != "test" {
		t.Errorf("metadata %v", s.Metadata())
	}

	for _, tc := range []struct {
		c    Columns
		want string
	}{
		{Columns{Propensity: "a", Weight: "w", InSupport: "s"}, `"a"`},
		{Columns{Propensity: "p", Weight: "b", InSupport: "s"}, "--weight-column"},
		{Columns{Propensity: "p", Weight: "p", InSupport: "s"}, "--propensity-column and --weight-column"},
		{Columns{Propensity: "p", Weight: "w", InSupport: ""}, "--in-support-column"},
		{Columns{Propensity: "p", Weight: "w", InSupport: "s", Mu0: "a", Mu1: "m", Predictions: true}, "--mu0-column"},
	} {
		if _, err := OutputSchema(in, tc.c, arrow.Metadata{}); err == nil || !strings.Contains(err.Error(), tc.want) {
			t.Errorf("%+v: error %v, want one mentioning %s", tc.c, err, tc.want)
		}
	}
	// Mu names are free when predictions are off.
	if _, err := OutputSchema(in, Columns{Propensity: "p", Weight: "w", InSupport: "s", Mu0: "a"}, arrow.Metadata{}); err != nil {
		t.Errorf("mu0 clash without predictions: %v", err)
	}
}

func TestColumnsCheckModel(t *testing.T) {
	c := DefaultColumns()
	c.Predictions = true
	if err := c.Check(&fit.Model{}); err == nil || !strings.Contains(err.Error(), "--predictions") {
		t.Errorf("predictions without outcome models: %v", err)
	}
	if err := c.Check(&fit.Model{Outcome: &fit.OutcomeModels{}}); err != nil {
		t.Error(err)
	}
}

func benchmarkAppend(b *testing.B, build func(mem memory.Allocator, v []float64, valid []bool) arrow.Array) {
	const n = 65536
	mem := memory.NewGoAllocator()
	sc := scoresOf(n, false)
	b.SetBytes(n * 8)
	for b.Loop() {
		a := build(mem, sc.W, sc.WValid)
		a.Release()
	}
}

// BenchmarkAppend measures one nullable float64 column built by copying
// the slice (as Append does); BenchmarkAppendBuilder the same through an
// array builder, for comparison.
func BenchmarkAppend(b *testing.B) {
	benchmarkAppend(b, func(mem memory.Allocator, v []float64, valid []bool) arrow.Array {
		return float64Array(mem, v, valid)
	})
}

func BenchmarkAppendBuilder(b *testing.B) {
	benchmarkAppend(b, func(mem memory.Allocator, v []float64, valid []bool) arrow.Array {
		bl := array.NewFloat64Builder(mem)
		defer bl.Release()
		bl.AppendValues(v, valid)
		return bl.NewArray()
	})
}

func BenchmarkAppendRecord(b *testing.B) {
	const n = 65536
	mem := memory.NewGoAllocator()
	rec := inputBatch(mem, n)
	defer rec.Release()
	c := DefaultColumns()
	schema, err := OutputSchema(rec.Schema(), c, arrow.Metadata{})
	if err != nil {
		b.Fatal(err)
	}
	sc := scoresOf(n, false)
	for b.Loop() {
		Append(mem, schema, rec, 0, sc, c).Release()
	}
	b.ReportMetric(float64(n)*float64(b.N)/b.Elapsed().Seconds(), "rows/s")
}
