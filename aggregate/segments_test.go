package aggregate

import (
	"strings"
	"testing"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/array"
	"github.com/apache/arrow-go/v18/arrow/memory"
	"github.com/heft-project/heft/score"
)

// TestSegmentKeys checks that keys of different tuples differ, that a key
// decodes to its values and encodes back, and how values are written.
func TestSegmentKeys(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.DefaultAllocator)
	defer mem.AssertSize(t, 0)
	long := strings.Repeat("x", 300) // a length needing two uvarint bytes
	sb := array.NewStringBuilder(mem)
	sb.AppendValues([]string{"a", "", long, "a", "b"}, []bool{true, true, true, false, true})
	ib := array.NewInt64Builder(mem)
	ib.AppendValues([]int64{1, -2, 3, 4, 5}, nil)
	bb := array.NewBooleanBuilder(mem)
	bb.AppendValues([]bool{true, false, true, true, false}, nil)
	fb := array.NewFloat64Builder(mem)
	fb.AppendValues([]float64{0.1, 2, 1e21, -0.5, 3}, nil)
	db := array.NewDictionaryBuilder(mem, &arrow.DictionaryType{IndexType: arrow.PrimitiveTypes.Int32, ValueType: arrow.BinaryTypes.String}).(*array.BinaryDictionaryBuilder)
	for _, v := range []string{"p", "q", "p", "q", "r"} {
		db.AppendString(v)
	}
	cols := []arrow.Array{sb.NewArray(), ib.NewArray(), bb.NewArray(), fb.NewArray(), db.NewArray()}
	for _, b := range []interface{ Release() }{sb, ib, bb, fb, db} {
		b.Release()
	}
	defer func() {
		for _, c := range cols {
			c.Release()
		}
	}()
	want := [][]string{
		{"a", "1", "true", "0.1", "p"},
		{"", "-2", "false", "2", "q"},
		{long, "3", "true", "1e+21", "p"},
		{NullValue, "4", "true", "-0.5", "q"},
		{"b", "5", "false", "3", "r"},
	}
	seen := map[string]bool{}
	for i, w := range want {
		key := string(appendKey(nil, cols, i))
		if seen[key] {
			t.Errorf("row %d: key repeats", i)
		}
		seen[key] = true
		vals := decodeKey(key)
		g := &segment{Values: vals}
		if got := g.text(); strings.Join(got, "|") != strings.Join(w, "|") {
			t.Errorf("row %d: values %q, want %q", i, got, w)
		}
		if encodeKey(vals) != key {
			t.Errorf("row %d: key does not encode back", i)
		}
	}
	// a null and the text "(null)" are different segments
	if encodeKey([]*string{nil}) == encodeKey([]*string{ptr(NullValue)}) {
		t.Error("null and \"(null)\" share a key")
	}
}

func ptr(s string) *string { return &s }

// TestAddAllocations checks that Add without segments allocates nothing
// per row: a 5000-row batch costs a handful of allocations at most.
func TestAddAllocations(t *testing.T) {
	fx := loadFixture(t)
	cfg := fx.config(score.ATE)
	cfg.By = nil
	s, err := New(cfg, nil)
	if err != nil {
		t.Fatal(err)
	}
	p := fx.part(t, score.ATE, 0, fx.n)
	allocs := testing.AllocsPerRun(5, func() {
		if err := s.Add(nil, &p.b, &p.s); err != nil {
			t.Fatal(err)
		}
	})
	if allocs > 10 {
		t.Errorf("Add allocates %v times per 5000-row batch", allocs)
	}
}
