package fit

import (
	"context"
	"math"
	"slices"
	"strings"
	"testing"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/memory"
)

// frameOf reads one in-memory batch into a Frame.
func frameOf(t *testing.T, opt SampleOptions, cols ...col) *Frame {
	t.Helper()
	src := newMemSource(mkBatch(t, memory.NewGoAllocator(), cols...))
	defer src.Close()
	fr, err := ReadSample(context.Background(), src, opt)
	if err != nil {
		t.Fatal(err)
	}
	return fr
}

// repeat lists v n times.
func repeat(v any, n int) []any {
	out := make([]any, n)
	for i := range out {
		out[i] = v
	}
	return out
}

func TestTerms(t *testing.T) {
	e := Encoding{Columns: []ColumnSpec{
		{Name: "age", Kind: KindNumeric},
		{Name: "inc", Kind: KindNumeric, MissingIndicator: true},
		{Name: "reg", Kind: KindCategorical, Reference: "n", Levels: []string{"s", "e"}, Pooled: []string{"w"}},
		{Name: "sex", Kind: KindCategorical, Reference: "f", Levels: []string{"m"}, MissingIndicator: true},
		{Name: "one", Kind: KindCategorical, Reference: "x"},
	}}
	want := []string{"intercept", "age", "inc", "inc=(missing)", "reg=s", "reg=e", "reg=(other)", "sex=m", "sex=(missing)"}
	if got := e.Terms(); !slices.Equal(got, want) {
		t.Fatalf("terms %q, want %q", got, want)
	}
	n := 0
	for _, c := range e.Columns {
		n += c.nTerms()
	}
	if n != len(want)-1 {
		t.Fatalf("nTerms sum %d", n)
	}
}

func TestLevels(t *testing.T) {
	cat := func(counts ...any) []any { // pairs: level, count
		var v []any
		for i := 0; i < len(counts); i += 2 {
			v = append(v, repeat(counts[i], counts[i+1].(int))...)
		}
		return v
	}
	cases := []struct {
		name     string
		typ      arrow.DataType
		vals     []any
		minLevel int
		ref      string
		levels   []string
		pooled   []string
		terms    []string
	}{
		{"frequency then lexical", arrow.BinaryTypes.String, cat("b", 12, "a", 12, "c", 15, "d", 3, "e", 1), 10,
			"c", []string{"a", "b"}, []string{"d", "e"}, []string{"x=a", "x=b", "x=(other)"}},
		{"reference tie broken lexically", arrow.BinaryTypes.String, cat("q", 20, "p", 20), 10,
			"p", []string{"q"}, nil, []string{"x=q"}},
		{"one kept level plus other", dictString, cat("x", 20, "z", 1, "y", 2), 10,
			"x", nil, []string{"y", "z"}, []string{"x=(other)"}},
		{"default min level", arrow.BinaryTypes.String, cat("u", 30, "v", 9, "w", 10), 0,
			"u", []string{"w"}, []string{"v"}, []string{"x=w", "x=(other)"}},
		{"min level 1 keeps all", arrow.BinaryTypes.String, cat("u", 3, "v", 1), 1,
			"u", []string{"v"}, nil, []string{"x=v"}},
		{"booleans", arrow.FixedWidthTypes.Boolean, cat(true, 15, false, 11), 10,
			"true", []string{"false"}, nil, []string{"x=false"}},
		{"integer codes", arrow.PrimitiveTypes.Int32, cat(7, 30, 12, 11, 3, 2, 10, 1), 10,
			"7", []string{"12"}, []string{"3", "10"}, []string{"x=12", "x=(other)"}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			n := len(c.vals)
			tv := make([]any, n)
			for i := range tv {
				tv[i] = i % 2
			}
			fr := frameOf(t, SampleOptions{Treatment: "t", Covariates: []string{"x"}, Categorical: []string{"x"}},
				col{"t", arrow.PrimitiveTypes.Int64, tv}, col{"x", c.typ, c.vals})
			specs, _, err := buildEncoding(fr, MissingError, c.minLevel)
			if err != nil {
				t.Fatal(err)
			}
			s := specs[0]
			if s.Kind != KindCategorical || s.Reference != c.ref || !slices.Equal(s.Levels, c.levels) || !slices.Equal(s.Pooled, c.pooled) {
				t.Fatalf("got %+v", s)
			}
			if got := s.terms(); !slices.Equal(got, c.terms) {
				t.Fatalf("terms %q, want %q", got, c.terms)
			}
		})
	}
}

func TestMissingPolicies(t *testing.T) {
	cols := []col{
		{"t", arrow.PrimitiveTypes.Int64, anys(0, 1, 0, 1, 0)},
		{"num", arrow.PrimitiveTypes.Float64, anys(1.0, math.NaN(), 3.0, nil, 8.0)},
		{"cat", arrow.BinaryTypes.String, anys("a", "a", nil, "b", "a")},
		{"full", arrow.PrimitiveTypes.Int64, anys(1, 2, 3, 4, 5)},
		{"empty", arrow.PrimitiveTypes.Float64, anys(nil, nil, nil, nil, nil)},
	}
	t.Run("error names column, count and first row", func(t *testing.T) {
		fr := frameOf(t, SampleOptions{Treatment: "t", Covariates: []string{"full", "num", "cat"}}, cols...)
		_, counts, err := buildEncoding(fr, MissingError, 10)
		if err == nil {
			t.Fatal("no error")
		}
		for _, w := range []string{"mem.parquet: row group 0: row 1", `column "num"`, "2 of 5 rows"} {
			if !strings.Contains(err.Error(), w) {
				t.Errorf("error %q lacks %q", err, w)
			}
		}
		if counts["num"] != 2 {
			t.Errorf("counts %v", counts)
		}
	})
	t.Run("indicator", func(t *testing.T) {
		fr := frameOf(t, SampleOptions{Treatment: "t", Covariates: []string{"full", "num", "cat"}}, cols...)
		specs, counts, err := buildEncoding(fr, MissingIndicator, 1)
		if err != nil {
			t.Fatal(err)
		}
		if specs[0].MissingIndicator || !specs[1].MissingIndicator || !specs[2].MissingIndicator {
			t.Fatalf("indicators: %+v", specs)
		}
		if specs[1].Impute != 4 { // mean of 1, 3, 8
			t.Errorf("impute %v, want 4", specs[1].Impute)
		}
		if specs[2].Reference != "a" || !slices.Equal(specs[2].Levels, []string{"b"}) {
			t.Errorf("cat %+v", specs[2])
		}
		if !maps(counts, map[string]int{"num": 2, "cat": 1}) {
			t.Errorf("counts %v", counts)
		}
	})
	t.Run("all missing", func(t *testing.T) {
		fr := frameOf(t, SampleOptions{Treatment: "t", Covariates: []string{"empty"}}, cols...)
		_, _, err := buildEncoding(fr, MissingIndicator, 1)
		if err == nil || !strings.Contains(err.Error(), "every row") {
			t.Fatalf("error %v", err)
		}
	})
}

func maps(a, b map[string]int) bool {
	if len(a) != len(b) {
		return false
	}
	for k, v := range a {
		if b[k] != v {
			return false
		}
	}
	return true
}

func TestDecideArms(t *testing.T) {
	cases := []struct {
		name    string
		typ     arrow.DataType
		vals    []any
		treated string
		wantT   []int8
		tv, cv  string
		err     []string
	}{
		{"int 0/1", arrow.PrimitiveTypes.Int64, anys(0, 1, nil, 1), "", []int8{0, 1, 1}, "1", "0", nil},
		{"uint8 0/1", arrow.PrimitiveTypes.Uint8, anys(1, 0), "", []int8{1, 0}, "1", "0", nil},
		{"bool", arrow.FixedWidthTypes.Boolean, anys(true, false, false), "", []int8{1, 0, 0}, "true", "false", nil},
		{"bool, false treated", arrow.FixedWidthTypes.Boolean, anys(true, false), "false", []int8{0, 1}, "false", "true", nil},
		{"strings", arrow.BinaryTypes.String, anys("drug", "placebo", "drug"), "placebo", []int8{0, 1, 0}, "placebo", "drug", nil},
		{"dictionary strings", dictString, anys("a", "b"), "a", []int8{1, 0}, "a", "b", nil},
		{"strings without treated value", arrow.BinaryTypes.String, anys("a", "b"), "", nil, "", "", []string{"needs the treated value", `"a" (1 rows)`}},
		{"treated value absent", arrow.BinaryTypes.String, anys("a", "b"), "c", nil, "", "", []string{`"c" is not among`}},
		{"1/2", arrow.PrimitiveTypes.Int32, anys(1, 2, 2), "", nil, "", "", []string{"must be 0/1", `"2" (2 rows), "1" (1 rows)`}},
		{"three strings", arrow.BinaryTypes.String, anys("a", "b", "c", "c"), "a", nil, "", "", []string{"two arms", `"c" (2 rows), "a" (1 rows), "b" (1 rows)`}},
		{"all one value", arrow.PrimitiveTypes.Int64, anys(1, 1), "", nil, "", "", []string{"two arms", `"1" (2 rows)`}},
		{"all null", arrow.PrimitiveTypes.Int64, anys(nil, nil), "", nil, "", "", []string{"no rows with a non-null treatment", "2 with a null"}},
		{"many values", arrow.PrimitiveTypes.Int64, anys(0, 1, 2, 3, 4, 5, 6), "", nil, "", "", []string{"and 2 more"}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			x := make([]any, len(c.vals))
			for i := range x {
				x[i] = float64(i)
			}
			fr := frameOf(t, SampleOptions{Treatment: "t", Covariates: []string{"x"}},
				col{"t", c.typ, c.vals}, col{"x", arrow.PrimitiveTypes.Float64, x})
			tr, tt, err := decideArms(fr, c.treated)
			if c.err != nil {
				if err == nil {
					t.Fatalf("no error; arms %+v", tr)
				}
				for _, w := range c.err {
					if !strings.Contains(err.Error(), w) {
						t.Errorf("error %q lacks %q", err, w)
					}
				}
				return
			}
			if err != nil {
				t.Fatal(err)
			}
			if !slices.Equal(tt, c.wantT) || tr.TreatedValue != c.tv || tr.ControlValue != c.cv || tr.Column != "t" {
				t.Fatalf("got %+v %v", tr, tt)
			}
		})
	}
}

func TestDecideOutcome(t *testing.T) {
	cases := []struct {
		name, kind string
		vals       []any
		want       string
		err        bool
	}{
		{"auto binary", "", anys(1.0, nil), "binary", false},
		{"auto continuous", "", anys(0.0, 1.5), "continuous", false},
		{"declared continuous", "continuous", anys(0.0, 1.0), "continuous", false},
		{"declared binary but not", "binary", anys(0.0, 2.0), "", true},
		{"all missing", "", anys(nil, nil), "", true},
		{"bad kind", "count", anys(0.0, 1.0), "", true},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			fr := frameOf(t, SampleOptions{Treatment: "t", Outcome: "y"},
				col{"t", arrow.PrimitiveTypes.Int64, anys(0, 1)}, col{"y", arrow.PrimitiveTypes.Float64, c.vals})
			o, err := decideOutcome(fr, c.kind)
			if c.err {
				if err == nil {
					t.Fatalf("no error: %+v", o)
				}
				return
			}
			if err != nil || o.Kind != c.want {
				t.Fatalf("got %+v, %v", o, err)
			}
		})
	}
}
