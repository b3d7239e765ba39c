package score

import (
	"context"
	"errors"
	"math"
	"strings"
	"sync"
	"testing"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/array"
	"github.com/apache/arrow-go/v18/arrow/memory"
	"github.com/heft-project/heft/fit"
	"github.com/heft-project/heft/pipeline"
)

// fakeEncoder encodes column 0 (float64) as the one term and column 1
// (int64, null = no treatment) as T, standing in for *fit.Encoder.
type fakeEncoder struct{ err error }

func (f fakeEncoder) Encode(rec arrow.RecordBatch, loc pipeline.Location, b *fit.Batch) error {
	if f.err != nil {
		return f.err
	}
	n := int(rec.NumRows())
	b.N = n
	if len(b.X) != 1 {
		b.X = make([][]float64, 1)
	}
	b.X[0] = append(b.X[0][:0], rec.Column(0).(*array.Float64).Float64Values()...)
	b.T = b.T[:0]
	tc := rec.Column(1).(*array.Int64)
	for i := 0; i < n; i++ {
		if tc.IsNull(i) {
			b.T = append(b.T, -1)
		} else {
			b.T = append(b.T, int8(tc.Value(i)))
		}
	}
	return nil
}

// sumWeights is an Accumulator: it adds the valid weights of a batch.
type sumWeights struct {
	rows int
	sum  float64
}

func (a *sumWeights) Add(rec arrow.RecordBatch, b *fit.Batch, s *Scores) error {
	a.rows += s.N
	for i, w := range s.W[:s.N] {
		if s.WValid[i] {
			a.sum += w
		}
	}
	return nil
}

func stageInput(mem memory.Allocator, x []float64, tr []int64, valid []bool) arrow.RecordBatch {
	schema := arrow.NewSchema([]arrow.Field{
		{Name: "x", Type: arrow.PrimitiveTypes.Float64},
		{Name: "t", Type: arrow.PrimitiveTypes.Int64, Nullable: true},
		{Name: "part", Type: arrow.BinaryTypes.String},
	}, nil)
	b := array.NewRecordBuilder(mem, schema)
	defer b.Release()
	b.Field(0).(*array.Float64Builder).AppendValues(x, nil)
	b.Field(1).(*array.Int64Builder).AppendValues(tr, valid)
	for range x {
		b.Field(2).(*array.StringBuilder).Append("p=1")
	}
	return b.NewRecordBatch()
}

func TestStage(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)
	sc, err := New(oneTerm(0.5), Policy{Estimand: ATE})
	if err != nil {
		t.Fatal(err)
	}
	c := DefaultColumns()
	rec := stageInput(mem, []float64{0, 1, -1, 2}, []int64{1, 0, 1, 0}, []bool{true, true, false, true})
	defer rec.Release()
	kept := arrow.NewSchema(rec.Schema().Fields()[:2], nil)
	schema, err := OutputSchema(kept, c, arrow.Metadata{})
	if err != nil {
		t.Fatal(err)
	}
	st := NewStage(fakeEncoder{}, sc, StageOptions{
		Alloc: mem, Columns: c, OutputSchema: schema, Keep: 2, WriteTable: true,
		NewAccumulator: func() Accumulator { return &sumWeights{} },
	})
	loc := pipeline.Location{File: "a.parquet", RowGroup: 0}
	for round := 0; round < 3; round++ { // buffers are reused across batches
		out, partial, err := st.Apply(context.Background(), rec, loc)
		if err != nil {
			t.Fatal(err)
		}
		if !out.Schema().Equal(schema) || out.NumRows() != 4 {
			t.Fatalf("output schema %v rows %d", out.Schema(), out.NumRows())
		}
		w := out.Column(3).(*array.Float64)
		if w.IsValid(2) || !w.IsValid(0) || w.Value(0) != 2 || !near(w.Value(1), math.E+1, 1e-12) {
			t.Errorf("weights %v", w)
		}
		acc := partial.(*sumWeights)
		want := 2 + 1/(1-logistic(1)) + 1/(1-logistic(2))
		if acc.rows != 4 || !near(acc.sum, want, 1e-12) {
			t.Errorf("partial %+v, want 4 rows and sum %v", acc, want)
		}
		out.Release()
	}

	// A report-only run writes nothing.
	st = NewStage(fakeEncoder{}, sc, StageOptions{Alloc: mem, Columns: c, NewAccumulator: func() Accumulator { return &sumWeights{} }})
	out, partial, err := st.Apply(context.Background(), rec, loc)
	if err != nil || out != nil || partial == nil {
		t.Errorf("report-only: out %v partial %v err %v", out, partial, err)
	}
}

func TestStageErrors(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)
	sc, _ := New(oneTerm(0.5), Policy{Estimand: ATE})
	rec := stageInput(mem, []float64{0, 50}, []int64{1, 0}, nil)
	defer rec.Release()
	c := DefaultColumns()
	full, _ := OutputSchema(rec.Schema(), c, arrow.Metadata{})
	other, _ := OutputSchema(arrow.NewSchema([]arrow.Field{
		{Name: "x", Type: arrow.PrimitiveTypes.Float32},
		{Name: "t", Type: arrow.PrimitiveTypes.Int64, Nullable: true},
		{Name: "part", Type: arrow.BinaryTypes.String},
	}, nil), c, arrow.Metadata{})
	loc := pipeline.Location{File: "b.parquet", RowGroup: 3, Row: 100}
	cancelled, cancel := context.WithCancel(context.Background())
	cancel()
	boom := errors.New("boom")
	pc := c
	pc.Predictions = true
	for _, tc := range []struct {
		name string
		ctx  context.Context
		enc  BatchEncoder
		opt  StageOptions
		want string
	}{
		{"cancelled", cancelled, fakeEncoder{}, StageOptions{Columns: c, OutputSchema: full, WriteTable: true}, "canceled"},
		{"encoder", context.Background(), fakeEncoder{err: boom}, StageOptions{Columns: c, OutputSchema: full, WriteTable: true}, "boom"},
		{"type mismatch", context.Background(), fakeEncoder{}, StageOptions{Columns: c, OutputSchema: other, WriteTable: true}, `column "x"`},
		{"no schema", context.Background(), fakeEncoder{}, StageOptions{Columns: c, WriteTable: true}, "no output schema"},
		{"predictions", context.Background(), fakeEncoder{}, StageOptions{Columns: pc, OutputSchema: full, WriteTable: true}, "--predictions"},
	} {
		tc.opt.Alloc = mem
		// Row 1 has lp 50: e rounds to 1, which only matters for the
		// cases that get as far as scoring; give them a clip.
		p := Policy{Estimand: ATE, Clip: 1e-3}
		sc, _ = New(oneTerm(0.5), p)
		out, _, err := NewStage(tc.enc, sc, tc.opt).Apply(tc.ctx, rec, loc)
		if err == nil || !strings.Contains(err.Error(), tc.want) {
			t.Errorf("%s: error %v, want one mentioning %s", tc.name, err, tc.want)
		}
		if out != nil {
			out.Release()
		}
	}
	// Without clipping, e = 1 is a located error from the scorer.
	sc, _ = New(oneTerm(0.5), Policy{Estimand: ATE})
	_, _, err := NewStage(fakeEncoder{}, sc, StageOptions{Alloc: mem, Columns: c, OutputSchema: full, WriteTable: true}).Apply(context.Background(), rec, loc)
	var pe *pipeline.Error
	if !errors.As(err, &pe) || pe.File != "b.parquet" || pe.RowGroup != 3 || pe.Row != 101 {
		t.Errorf("error %v, want b.parquet row group 3 row 101", err)
	}
}

// TestStageWithEncoder runs the real fit.Encoder through the stage: a
// numeric and a categorical covariate, a null treatment and a trailing
// partition column that Keep drops.
func TestStageWithEncoder(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)
	enc := fit.Encoding{
		Treatment: fit.Treatment{Column: "t", Type: "int64", TreatedValue: "1", ControlValue: "0"},
		Columns: []fit.ColumnSpec{
			{Name: "x", Type: "float64", Kind: fit.KindNumeric},
			{Name: "g", Type: "utf8", Kind: fit.KindCategorical, Reference: "a", Levels: []string{"b", "c"}},
		},
		Missing: fit.MissingError,
	}
	coef := []float64{-0.2, 0.7, 0.5, -1.0}
	m := &fit.Model{
		Encoding:   enc,
		Propensity: fit.GLM{Family: fit.FamilyBinomial, Terms: enc.Terms(), Coef: coef},
		Reference:  fit.Reference{ShareTreated: 0.4},
	}
	schema := arrow.NewSchema([]arrow.Field{
		{Name: "x", Type: arrow.PrimitiveTypes.Float64},
		{Name: "g", Type: arrow.BinaryTypes.String},
		{Name: "t", Type: arrow.PrimitiveTypes.Int64, Nullable: true},
		{Name: "dt", Type: arrow.BinaryTypes.String},
	}, nil)
	x := []float64{0.1, -1.5, 2.2, 0, 0.8}
	g := []string{"a", "b", "c", "b", "a"}
	tr := []int64{1, 0, 0, 1, 0}
	tvalid := []bool{true, true, true, false, true}
	b := array.NewRecordBuilder(mem, schema)
	b.Field(0).(*array.Float64Builder).AppendValues(x, nil)
	b.Field(1).(*array.StringBuilder).AppendValues(g, nil)
	b.Field(2).(*array.Int64Builder).AppendValues(tr, tvalid)
	for range x {
		b.Field(3).(*array.StringBuilder).Append("2026-06-01")
	}
	rec := b.NewRecordBatch()
	b.Release()
	defer rec.Release()

	encoder, err := m.Encoding.Bind(schema, "in.parquet", false, fit.UnseenError)
	if err != nil {
		t.Fatal(err)
	}
	p := Policy{Estimand: ATT, Stabilize: true}
	sc, err := New(m, p)
	if err != nil {
		t.Fatal(err)
	}
	c := DefaultColumns()
	out, err := OutputSchema(arrow.NewSchema(schema.Fields()[:3], nil), c, MergeMetadata(schema.Metadata(), Metadata(m, p, c, "test")))
	if err != nil {
		t.Fatal(err)
	}
	st := NewStage(encoder, sc, StageOptions{Alloc: mem, Columns: c, OutputSchema: out, Keep: 3, WriteTable: true})
	res, _, err := st.Apply(context.Background(), rec, pipeline.Location{File: "in.parquet", RowGroup: 0})
	if err != nil {
		t.Fatal(err)
	}
	defer res.Release()
	if res.NumCols() != 6 || res.Schema().Field(3).Name != "propensity" {
		t.Fatalf("output schema %v", res.Schema())
	}
	e := res.Column(3).(*array.Float64)
	w := res.Column(4).(*array.Float64)
	for i := range x {
		lp := coef[0] + coef[1]*x[i]
		switch g[i] {
		case "b":
			lp += coef[2]
		case "c":
			lp += coef[3]
		}
		ei := 1 / (1 + math.Exp(-lp))
		// ATT, stabilized: treated 1·share; control e/(1−e)·(1−share).
		wi := 0.4
		if tr[i] == 0 {
			wi = ei / (1 - ei) * 0.6
		}
		if !near(e.Value(i), ei, 1e-12) {
			t.Errorf("row %d: e %v, want %v", i, e.Value(i), ei)
		}
		if w.IsValid(i) != tvalid[i] || (tvalid[i] && !near(w.Value(i), wi, 1e-12)) {
			t.Errorf("row %d: w %v (valid %v), want %v (valid %v)", i, w.Value(i), w.IsValid(i), wi, tvalid[i])
		}
	}

	// Stages made from one encoder run side by side (go test -race).
	var wg sync.WaitGroup
	errs := make(chan error, 2)
	for range 2 {
		st := NewStage(encoder, sc, StageOptions{Alloc: mem, Columns: c, OutputSchema: out, Keep: 3, WriteTable: true})
		wg.Add(1)
		go func() {
			defer wg.Done()
			for range 20 {
				r, _, err := st.Apply(context.Background(), rec, pipeline.Location{File: "in.parquet"})
				if err != nil {
					errs <- err
					return
				}
				if !array.Equal(r.Column(4), res.Column(4)) {
					errs <- errors.New("concurrent stage wrote different weights")
				}
				r.Release()
			}
		}()
	}
	wg.Wait()
	close(errs)
	for err := range errs {
		t.Error(err)
	}
}
