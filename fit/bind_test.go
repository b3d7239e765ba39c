package fit

import (
	"errors"
	"math"
	"slices"
	"strings"
	"testing"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/memory"

	"github.com/heft-project/heft/pipeline"
)

// testEncoding has one covariate of each kind and type class.
func testEncoding() *Encoding {
	return &Encoding{
		Treatment: Treatment{Column: "t", Type: "int64", TreatedValue: "1", ControlValue: "0"},
		Outcome:   &Outcome{Column: "y", Type: "float64", Kind: "continuous"},
		Missing:   MissingIndicator,
		Columns: []ColumnSpec{
			{Name: "age", Type: "int64", Kind: KindNumeric},
			{Name: "inc", Type: "float64", Kind: KindNumeric, MissingIndicator: true, Impute: 2.5},
			{Name: "reg", Type: "utf8", Kind: KindCategorical, Reference: "n", Levels: []string{"s", "e"}, Pooled: []string{"w"}},
			{Name: "vip", Type: "bool", Kind: KindCategorical, Reference: "false", Levels: []string{"true"}},
			{Name: "code", Type: "int16", Kind: KindCategorical, Reference: "3", Levels: []string{"7"}, MissingIndicator: true},
		},
	}
}

func TestEncodeTypes(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)
	// Terms: age, inc, inc=(missing), reg=s, reg=e, reg=(other), vip=true, code=7, code=(missing).
	want := [][]float64{
		{30, 40, 50, 60},
		{1, 2.5, 2.5, 4},
		{0, 1, 1, 0},
		{1, 0, 0, 0},
		{0, 0, 1, 0},
		{0, 0, 0, 1},
		{1, 0, 0, 1},
		{0, 1, 0, 0},
		{0, 0, 1, 0},
	}
	cases := []struct {
		name string
		cols []col
	}{
		{"fit types", []col{
			{"y", arrow.PrimitiveTypes.Float64, anys(1.5, nil, math.NaN(), 4.0)},
			{"t", arrow.PrimitiveTypes.Int64, anys(1, 0, nil, 1)},
			{"age", arrow.PrimitiveTypes.Int64, anys(30, 40, 50, 60)},
			{"inc", arrow.PrimitiveTypes.Float64, anys(1.0, nil, math.NaN(), 4.0)},
			{"reg", arrow.BinaryTypes.String, anys("s", "n", "e", "w")},
			{"vip", arrow.FixedWidthTypes.Boolean, anys(true, false, false, true)},
			{"code", arrow.PrimitiveTypes.Int16, anys(3, 7, nil, 3)},
		}},
		{"other widths and encodings", []col{
			{"t", arrow.PrimitiveTypes.Uint8, anys(1, 0, nil, 1)},
			{"code", arrow.PrimitiveTypes.Uint64, anys(3, 7, nil, 3)},
			{"reg", dictString, anys("s", "n", "e", "w")},
			{"inc", arrow.PrimitiveTypes.Float32, anys(1.0, nil, math.NaN(), 4.0)},
			{"vip", arrow.FixedWidthTypes.Boolean, anys(true, false, false, true)},
			{"age", arrow.PrimitiveTypes.Int8, anys(30, 40, 50, 60)},
			{"y", arrow.PrimitiveTypes.Int32, anys(1, nil, nil, 4)},
			{"extra", arrow.BinaryTypes.Binary, []any{nil, nil, nil, nil}},
		}},
		{"string views and float16", []col{
			{"t", arrow.PrimitiveTypes.Int16, anys(1, 0, nil, 1)},
			{"age", arrow.FixedWidthTypes.Float16, anys(30.0, 40.0, 50.0, 60.0)},
			{"inc", arrow.FixedWidthTypes.Float16, anys(1.0, nil, math.NaN(), 4.0)},
			{"reg", arrow.BinaryTypes.StringView, anys("s", "n", "e", "w")},
			{"vip", arrow.FixedWidthTypes.Boolean, anys(true, false, false, true)},
			{"code", arrow.PrimitiveTypes.Uint8, anys(3, 7, nil, 3)},
			{"y", arrow.FixedWidthTypes.Float16, anys(1.5, nil, nil, 4.0)},
		}},
		{"large strings", []col{
			{"t", arrow.PrimitiveTypes.Int32, anys(1, 0, nil, 1)},
			{"age", arrow.PrimitiveTypes.Float64, anys(30.0, 40.0, 50.0, 60.0)},
			{"inc", arrow.PrimitiveTypes.Int64, anys(1, nil, nil, 4)},
			{"reg", arrow.BinaryTypes.LargeString, anys("s", "n", "e", "w")},
			{"vip", arrow.FixedWidthTypes.Boolean, anys(true, false, false, true)},
			{"code", arrow.PrimitiveTypes.Int64, anys(3, 7, nil, 3)},
			{"y", arrow.PrimitiveTypes.Float64, anys(1.5, nil, nil, 4.0)},
		}},
	}
	e := testEncoding()
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			rec := mkBatch(t, mem, c.cols...)
			defer rec.Release()
			enc, err := e.Bind(rec.Schema(), "in.parquet", true, UnseenError)
			if err != nil {
				t.Fatal(err)
			}
			var b Batch
			for range 2 { // buffers are reused
				if err := enc.Encode(rec, pipeline.Location{File: "in.parquet", RowGroup: 0}, &b); err != nil {
					t.Fatal(err)
				}
				if b.N != 4 || len(b.X) != len(e.Terms())-1 || enc.NumTerms() != len(b.X) {
					t.Fatalf("N %d, %d columns", b.N, len(b.X))
				}
				for j := range want {
					if !slices.Equal(b.X[j], want[j]) {
						t.Errorf("term %s: %v, want %v", e.Terms()[j+1], b.X[j], want[j])
					}
				}
				if !slices.Equal(b.T, []int8{1, 0, -1, 1}) {
					t.Errorf("T %v", b.T)
				}
				if !slices.Equal(b.YValid, []bool{true, false, false, true}) || (b.Y[0] != 1.5 && b.Y[0] != 1) || b.Y[3] != 4 {
					t.Errorf("Y %v %v", b.Y, b.YValid)
				}
				if b.MissingImputed["inc"] != 2 || b.MissingImputed["code"] != 1 || len(b.Unseen) != 0 {
					t.Errorf("imputed %v unseen %v", b.MissingImputed, b.Unseen)
				}
			}
		})
	}
}

func TestEncodeUnseen(t *testing.T) {
	mem := memory.NewGoAllocator()
	e := testEncoding()
	for _, typ := range []arrow.DataType{arrow.BinaryTypes.String, dictString} {
		rec := mkBatch(t, mem,
			col{"t", arrow.PrimitiveTypes.Int64, anys(1, 0, 0)},
			col{"age", arrow.PrimitiveTypes.Int64, anys(1, 2, 3)},
			col{"inc", arrow.PrimitiveTypes.Float64, anys(1.0, 2.0, 3.0)},
			col{"reg", typ, anys("s", "mars", "mars")},
			col{"vip", arrow.FixedWidthTypes.Boolean, anys(true, false, false)},
			col{"code", arrow.PrimitiveTypes.Int16, anys(3, 7, 99)},
		)
		loc := pipeline.Location{File: "in.parquet", RowGroup: 2, Row: 100}
		enc, err := e.Bind(rec.Schema(), "in.parquet", false, UnseenError)
		if err != nil {
			t.Fatal(err)
		}
		var b Batch
		err = enc.Encode(rec, loc, &b)
		var pe *pipeline.Error
		if !errors.As(err, &pe) || pe.Row != 101 || pe.RowGroup != 2 || pe.Column != "reg" || !strings.Contains(err.Error(), `"mars"`) {
			t.Fatalf("%s: error %v", typ, err)
		}
		enc, err = e.Bind(rec.Schema(), "in.parquet", false, UnseenReference)
		if err != nil {
			t.Fatal(err)
		}
		if err := enc.Encode(rec, loc, &b); err != nil {
			t.Fatal(err)
		}
		if b.Unseen["reg"] != 2 || b.Unseen["code"] != 1 {
			t.Errorf("unseen %v", b.Unseen)
		}
		// Unseen rows are the reference: all of reg's terms are 0.
		for j := 2; j <= 4; j++ {
			if b.X[j+1][1] != 0 || b.X[j+1][2] != 0 {
				t.Errorf("term %d: %v", j+1, b.X[j+1])
			}
		}
		if b.X[6][2] != 0 || b.X[7][2] != 0 {
			t.Errorf("code terms %v %v", b.X[6], b.X[7])
		}
		if b.Y != nil && len(b.Y) != 0 {
			t.Errorf("Y without outcome: %v", b.Y)
		}
		rec.Release()
	}
}

func TestEncodeErrors(t *testing.T) {
	mem := memory.NewGoAllocator()
	good := func() []col {
		return []col{
			{"t", arrow.PrimitiveTypes.Int64, anys(1, 0, 0)},
			{"age", arrow.PrimitiveTypes.Int64, anys(1, 2, 3)},
			{"inc", arrow.PrimitiveTypes.Float64, anys(1.0, 2.0, 3.0)},
			{"reg", arrow.BinaryTypes.String, anys("s", "n", "n")},
			{"vip", arrow.FixedWidthTypes.Boolean, anys(true, false, false)},
			{"code", arrow.PrimitiveTypes.Int16, anys(3, 7, 3)},
			{"y", arrow.PrimitiveTypes.Float64, anys(1.0, 2.0, 3.0)},
		}
	}
	with := func(name string, typ arrow.DataType, vals []any) []col {
		c := good()
		for i := range c {
			if c[i].name == name {
				c[i] = col{name, typ, vals}
			}
		}
		return c
	}
	without := func(name string) []col {
		return slices.DeleteFunc(good(), func(c col) bool { return c.name == name })
	}
	cases := []struct {
		name    string
		cols    []col
		missing string
		bind    bool // the error comes from Bind
		want    []string
	}{
		{"string where a number was", with("age", arrow.BinaryTypes.String, anys("1", "2", "3")), "", true,
			[]string{"in.parquet", `column "age"`, "utf8 (string)", "int64 (integer)"}},
		{"number where a string was", with("reg", arrow.PrimitiveTypes.Float64, anys(1.0, 2.0, 3.0)), "", true,
			[]string{`column "reg"`, "float64", "utf8"}},
		{"string where integer codes were", with("code", arrow.BinaryTypes.String, anys("3", "7", "3")), "", true,
			[]string{`column "code"`, "int16"}},
		{"bool treatment where int was", with("t", arrow.FixedWidthTypes.Boolean, anys(true, false, false)), "", true,
			[]string{`column "t"`, "treatment", "bool"}},
		{"missing covariate", without("vip"), "", true, []string{`column "vip"`, "not found"}},
		{"missing treatment", without("t"), "", true, []string{`column "t"`, "treatment column not found"}},
		{"missing outcome", without("y"), "", true, []string{`column "y"`, "outcome column not found"}},
		{"unknown treatment value", with("t", arrow.PrimitiveTypes.Int64, anys(1, 2, 0)), "", false,
			[]string{"row group 4: row 11", `column "t"`, `value "2"`}},
		{"infinite covariate", with("inc", arrow.PrimitiveTypes.Float64, anys(1.0, math.Inf(-1), 3.0)), "", false,
			[]string{"row 11", `column "inc"`, "-Inf"}},
		{"infinite outcome", with("y", arrow.PrimitiveTypes.Float64, anys(1.0, 2.0, math.Inf(1))), "", false,
			[]string{"row 12", `column "y"`, "+Inf"}},
		{"missing numeric under error", with("age", arrow.PrimitiveTypes.Int64, anys(1, nil, nil)), MissingError, false,
			[]string{"row 11", `column "age"`, "2 rows in this batch are missing"}},
		{"missing categorical under error", with("reg", arrow.BinaryTypes.String, anys(nil, "n", "n")), MissingError, false,
			[]string{"row 10", `column "reg"`, "1 rows in this batch"}},
		{"missing categorical without indicator", with("vip", arrow.FixedWidthTypes.Boolean, anys(true, nil, false)), MissingIndicator, false,
			[]string{"row 11", `column "vip"`, "missing"}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			e := testEncoding()
			if c.missing == MissingError {
				e.Missing = MissingError
				for i := range e.Columns {
					e.Columns[i].MissingIndicator = false
				}
			}
			rec := mkBatch(t, mem, c.cols...)
			defer rec.Release()
			enc, err := e.Bind(rec.Schema(), "in.parquet", true, UnseenError)
			if err == nil {
				if c.bind {
					t.Fatal("Bind: no error")
				}
				err = enc.Encode(rec, pipeline.Location{File: "in.parquet", RowGroup: 4, Row: 10}, &Batch{})
			} else if !c.bind {
				t.Fatalf("Bind: %v", err)
			}
			if err == nil {
				t.Fatal("no error")
			}
			var pe *pipeline.Error
			if !errors.As(err, &pe) {
				t.Errorf("%T is not a *pipeline.Error", err)
			}
			for _, w := range c.want {
				if !strings.Contains(err.Error(), w) {
					t.Errorf("error %q lacks %q", err, w)
				}
			}
		})
	}
}

// A string treatment arriving dictionary-encoded decodes by its text; a null is -1.
func TestBindBoolTreatmentAndStrings(t *testing.T) {
	mem := memory.NewGoAllocator()
	e := &Encoding{
		Treatment: Treatment{Column: "arm", Type: "utf8", TreatedValue: "drug", ControlValue: "placebo"},
		Columns:   []ColumnSpec{{Name: "x", Type: "float64", Kind: KindNumeric}},
		Missing:   MissingError,
	}
	rec := mkBatch(t, mem,
		col{"arm", dictString, anys("placebo", "drug", nil, "drug")},
		col{"x", arrow.PrimitiveTypes.Float64, anys(1.0, 2.0, 3.0, 4.0)})
	defer rec.Release()
	enc, err := e.Bind(rec.Schema(), "f", false, "")
	if err != nil {
		t.Fatal(err)
	}
	var b Batch
	if err := enc.Clone().Encode(rec, pipeline.Location{File: "f"}, &b); err != nil {
		t.Fatal(err)
	}
	if !slices.Equal(b.T, []int8{0, 1, -1, 1}) {
		t.Fatalf("T %v", b.T)
	}
	if _, err := e.Bind(rec.Schema(), "f", false, "ignore"); err == nil {
		t.Fatal("bad unseen policy accepted")
	}
}

// BenchmarkEncode: one 65536-row batch with a column of each kind.
func BenchmarkEncode(b *testing.B) {
	mem := memory.NewGoAllocator()
	const n = 1 << 16
	regs := []string{"n", "s", "e", "w", "mars"}
	var t, age, inc, reg, vip, code []any
	for i := range n {
		t = append(t, i%2)
		age = append(age, 20+i%50)
		inc = append(inc, float64(i%1000)/7)
		reg = append(reg, regs[i%4])
		vip = append(vip, i%3 == 0)
		code = append(code, []int{3, 7}[i%2])
	}
	rec := mkBatch(b, mem,
		col{"t", arrow.PrimitiveTypes.Int64, t}, col{"age", arrow.PrimitiveTypes.Int64, age},
		col{"inc", arrow.PrimitiveTypes.Float64, inc}, col{"reg", dictString, reg},
		col{"vip", arrow.FixedWidthTypes.Boolean, vip}, col{"code", arrow.PrimitiveTypes.Int16, code})
	defer rec.Release()
	enc, err := testEncoding().Bind(rec.Schema(), "b", false, UnseenError)
	if err != nil {
		b.Fatal(err)
	}
	var batch Batch
	b.SetBytes(n) // one "byte" per row: MB/s reads as million rows per second
	b.ReportAllocs()
	for b.Loop() {
		if err := enc.Encode(rec, pipeline.Location{File: "b"}, &batch); err != nil {
			b.Fatal(err)
		}
	}
}

func TestEncodeSchemaDrift(t *testing.T) {
	mem := memory.NewGoAllocator()
	e := &Encoding{
		Treatment: Treatment{Column: "t", Type: "int64", TreatedValue: "1", ControlValue: "0"},
		Columns:   []ColumnSpec{{Name: "x", Type: "float64", Kind: KindNumeric}},
		Missing:   MissingIndicator,
	}
	a := mkBatch(t, mem, col{"t", arrow.PrimitiveTypes.Int64, anys(1, 0)}, col{"x", arrow.PrimitiveTypes.Float64, anys(1.0, nil)})
	b := mkBatch(t, mem, col{"x", arrow.PrimitiveTypes.Float64, anys(1.0, 2.0)}, col{"t", arrow.PrimitiveTypes.Int64, anys(1, 0)})
	defer a.Release()
	defer b.Release()
	enc, err := e.Bind(a.Schema(), "f", false, UnseenError)
	if err != nil {
		t.Fatal(err)
	}
	var batch Batch
	// x had no missing values at fit, so there is no indicator term for it.
	err = enc.Encode(a, pipeline.Location{File: "f"}, &batch)
	if err == nil || !strings.Contains(err.Error(), "no missing values in the fit sample") {
		t.Fatalf("error %v", err)
	}
	err = enc.Encode(b, pipeline.Location{File: "f"}, &batch)
	if err == nil || !strings.Contains(err.Error(), "schema differs") {
		t.Fatalf("error %v", err)
	}
}
