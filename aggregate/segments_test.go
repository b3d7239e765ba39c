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

// subset is the fixture's rows idx, in order.
func (fx *fixture) subset(idx []int) *fixture {
	s := &fixture{n: len(idx), x: make([][]float64, len(fx.x)), ref: fx.ref}
	for _, i := range idx {
		for j := range fx.x {
			s.x[j] = append(s.x[j], fx.x[j][i])
		}
		s.t = append(s.t, fx.t[i])
		s.y = append(s.y, fx.y[i])
		s.yValid = append(s.yValid, fx.yValid[i])
		s.e = append(s.e, fx.e[i])
		s.mu0 = append(s.mu0, fx.mu0[i])
		s.mu1 = append(s.mu1, fx.mu1[i])
		s.region = append(s.region, fx.region[i])
	}
	return s
}

// TestSegmentIsItsOwnRun checks that a segment's figures equal those of a
// run over the segment's rows alone: the gathering of rows loses nothing.
func TestSegmentIsItsOwnRun(t *testing.T) {
	fx := loadFixture(t)
	for _, estimand := range []string{score.ATE, score.Overlap} {
		s, err := New(fx.config(estimand), fixtureSchema)
		if err != nil {
			t.Fatal(err)
		}
		feed(t, s, fx.parts(t, estimand, []int{1234, 3000}))
		r := s.Report()
		for _, g := range r.Segments {
			var idx []int
			for i, v := range fx.region {
				if v == g.By["region"] || (v == "" && g.By["region"] == NullValue) {
					idx = append(idx, i)
				}
			}
			sub := fx.subset(idx)
			cfg := sub.config(estimand)
			cfg.By = nil
			alone, err := New(cfg, nil)
			if err != nil {
				t.Fatal(err)
			}
			feed(t, alone, []*part{sub.part(t, estimand, 0, sub.n)})
			want := alone.Report()
			if g.Rows != want.Rows || g.Treated != want.Treated || g.Control != want.Control || g.NullTreatment != want.NullTreatment {
				t.Errorf("%s: counts %d/%d/%d/%d, alone %d/%d/%d/%d", g.By["region"], g.Rows, g.Treated, g.Control, g.NullTreatment,
					want.Rows, want.Treated, want.Control, want.NullTreatment)
			}
			near(t, g.By["region"]+" ess treated", g.ESS.Treated, float64(want.ESS.Treated), 1e-12)
			near(t, g.By["region"]+" ess control", g.ESS.Control, float64(want.ESS.Control), 1e-12)
			if g.Suppressed {
				continue
			}
			for est, m := range want.Estimates {
				for name, w := range m {
					got, ok := g.Estimates[est][name]
					if !ok {
						t.Errorf("%s: no %s/%s", g.By["region"], est, name)
						continue
					}
					near(t, g.By["region"]+" "+est+"/"+name+" estimate", got.Estimate, float64(w.Estimate), 1e-12)
					near(t, g.By["region"]+" "+est+"/"+name+" se", got.SE, float64(w.SE), 1e-12)
				}
			}
		}
	}
}
