package fit

import (
	"context"
	"errors"
	"math"
	"slices"
	"strconv"
	"strings"
	"testing"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/memory"

	"github.com/heft-project/heft/pipeline"
)

// idSource yields rows 0..n-1 in batches of size bs: id (float64), t (int64,
// alternating 0/1) and lvl (string, the id as text).
func idSource(t testing.TB, mem memory.Allocator, n, bs int) *memSource {
	var recs []arrow.RecordBatch
	for lo := 0; lo < n; lo += bs {
		hi := min(lo+bs, n)
		var ids, ts, lv []any
		for i := lo; i < hi; i++ {
			ids = append(ids, float64(i))
			ts = append(ts, i%2)
			lv = append(lv, strconv.Itoa(i))
		}
		recs = append(recs, mkBatch(t, mem,
			col{"id", arrow.PrimitiveTypes.Float64, ids},
			col{"t", arrow.PrimitiveTypes.Int64, ts},
			col{"lvl", arrow.BinaryTypes.String, lv}))
	}
	return newMemSource(recs...)
}

func sampleIDs(t testing.TB, n, bs, size int, seed uint64) []int {
	t.Helper()
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	src := idSource(t, mem, n, bs)
	fr, err := ReadSample(context.Background(), src, SampleOptions{Treatment: "t", Covariates: []string{"id", "lvl"}, SampleRows: size, Seed: seed})
	src.Close()
	mem.AssertSize(t, 0)
	if err != nil {
		t.Fatal(err)
	}
	ids := make([]int, fr.N())
	for i, v := range fr.Columns[0].Num {
		ids[i] = int(v)
		// The categorical copy of the id must have travelled with its row.
		if got := fr.Columns[1].Dict[fr.Columns[1].Codes[i]]; got != strconv.Itoa(ids[i]) {
			t.Fatalf("row %d: lvl %q, id %d", i, got, ids[i])
		}
		if o := fr.Origin(i); o.Row != int64(ids[i]) || o.RowGroup != ids[i]/bs {
			t.Fatalf("row %d (id %d): origin %+v", i, ids[i], o)
		}
	}
	return ids
}

func TestReservoirSizeAndDeterminism(t *testing.T) {
	cases := []struct {
		name         string
		n, bs, size  int
		wantN        int
		wantSampled  bool
		wantAllInOrd bool
	}{
		{"every row", 50, 7, 0, 50, false, true},
		{"sample larger than input", 50, 7, 80, 50, true, true},
		{"sample equal to input", 50, 7, 50, 50, true, true},
		{"sample of 7", 500, 64, 7, 7, true, false},
		{"one-row batches", 60, 1, 9, 9, true, false},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			a := sampleIDs(t, c.n, c.bs, c.size, 42)
			if len(a) != c.wantN {
				t.Fatalf("got %d rows, want %d", len(a), c.wantN)
			}
			if b := sampleIDs(t, c.n, c.bs, c.size, 42); !slices.Equal(a, b) {
				t.Fatalf("same seed gave %v and %v", a, b)
			}
			if c.wantAllInOrd {
				for i, v := range a {
					if v != i {
						t.Fatalf("row %d is id %d", i, v)
					}
				}
				return
			}
			if b := sampleIDs(t, c.n, c.bs, c.size, 43); slices.Equal(a, b) {
				t.Fatalf("seeds 42 and 43 gave the same sample %v", a)
			}
			s := slices.Clone(a)
			slices.Sort(s)
			if len(slices.Compact(s)) != len(a) {
				t.Fatalf("a row was sampled twice: %v", a)
			}
		})
	}
}

// Algorithm R includes every row with probability N/n (Vitter 1985,
// Algorithm R). Over many seeds the inclusion counts of the n rows should
// be close to seeds·N/n; the chi-square statistic over the n cells has
// expectation about (n−1)(1−N/n) (the cells are negatively correlated),
// here ≈ 14.25; the bound 60 is loose on purpose so the test never flakes
// yet catches a biased sampler (e.g. always keeping the first rows).
func TestReservoirUniform(t *testing.T) {
	const n, size, seeds = 20, 5, 3000
	counts := make([]float64, n)
	for seed := range uint64(seeds) {
		for _, id := range sampleIDs(t, n, 6, size, seed) {
			counts[id]++
		}
	}
	expect := float64(seeds) * size / n
	chi2 := 0.0
	for _, o := range counts {
		chi2 += (o - expect) * (o - expect) / expect
	}
	if chi2 > 60 {
		t.Fatalf("chi-square %.1f over %d cells: counts %v (expect %.0f each)", chi2, n, counts, expect)
	}
}

func TestReservoirCompactsDictionaries(t *testing.T) {
	mem := memory.NewGoAllocator()
	src := idSource(t, mem, 6000, 500)
	fr, err := ReadSample(context.Background(), src, SampleOptions{Treatment: "t", Covariates: []string{"id", "lvl"}, SampleRows: 10, Seed: 1})
	if err != nil {
		t.Fatal(err)
	}
	if got := len(fr.Columns[1].Dict); got != 10 {
		t.Fatalf("dictionary holds %d levels for 10 rows", got)
	}
}

func TestReadSampleTypes(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	rec := mkBatch(t, mem,
		col{"t", arrow.FixedWidthTypes.Boolean, anys(true, nil, false, true)},
		col{"i8", arrow.PrimitiveTypes.Int8, anys(1, 2, nil, -4)},
		col{"u32", arrow.PrimitiveTypes.Uint32, anys(1, 2, 3, 4)},
		col{"f32", arrow.PrimitiveTypes.Float32, anys(0.5, 1.5, math.NaN(), nil)},
		col{"s", arrow.BinaryTypes.String, anys("a", "b", nil, "a")},
		col{"ls", arrow.BinaryTypes.LargeString, anys("x", "y", "y", "x")},
		col{"d", dictString, anys("p", "q", "q", nil)},
		col{"b", arrow.FixedWidthTypes.Boolean, anys(false, true, true, nil)},
		col{"code", arrow.PrimitiveTypes.Int16, anys(3, 3, 7, nil)},
		col{"y", arrow.PrimitiveTypes.Float64, anys(1.0, 2.0, nil, 4.0)},
	)
	src := newMemSource(rec)
	defer src.Close()
	fr, err := ReadSample(context.Background(), src, SampleOptions{
		Treatment: "t", Outcome: "y",
		Covariates:  []string{"i8", "u32", "f32", "s", "ls", "d", "b", "code"},
		Categorical: []string{"code", "s"},
	})
	if err != nil {
		t.Fatal(err)
	}
	if fr.N() != 3 || fr.RowsRead != 4 || fr.NullTreatment != 1 {
		t.Fatalf("N %d, read %d, null treatment %d", fr.N(), fr.RowsRead, fr.NullTreatment)
	}
	text := func(c *FrameColumn) []string {
		var out []string
		for _, k := range c.Codes {
			if k < 0 {
				out = append(out, "-")
			} else {
				out = append(out, c.Dict[k])
			}
		}
		return out
	}
	num := func(c *FrameColumn) []string {
		var out []string
		for _, v := range c.Num {
			out = append(out, strconv.FormatFloat(v, 'g', -1, 64))
		}
		return out
	}
	want := map[string]string{
		"t":    "cat true false true",
		"i8":   "num 1 NaN -4",
		"u32":  "num 1 3 4",
		"f32":  "num 0.5 NaN NaN",
		"s":    "cat a - a",
		"ls":   "cat x y x",
		"d":    "cat p q -",
		"b":    "cat false true -",
		"code": "cat 3 7 -",
		"y":    "num 1 NaN 4",
	}
	cols := append([]FrameColumn{fr.Treatment, *fr.Outcome}, fr.Columns...)
	for _, c := range cols {
		var got string
		if c.Kind == KindNumeric {
			got = "num " + strings.Join(num(&c), " ")
		} else {
			got = "cat " + strings.Join(text(&c), " ")
		}
		if got != want[c.Name] {
			t.Errorf("%s: got %q, want %q", c.Name, got, want[c.Name])
		}
	}
	if len(fr.Schema) != 10 || fr.Schema[6].Type != typeName(dictString) {
		t.Errorf("schema %+v", fr.Schema)
	}
}

func TestReadSampleErrors(t *testing.T) {
	mem := memory.NewGoAllocator()
	base := func() []col {
		return []col{
			{"t", arrow.PrimitiveTypes.Int64, anys(0, 1, 1)},
			{"x", arrow.PrimitiveTypes.Float64, anys(1.0, 2.0, math.Inf(1))},
			{"f", arrow.PrimitiveTypes.Float64, anys(0.0, 1.0, 1.0)},
			{"bin", arrow.BinaryTypes.Binary, []any{nil, nil, nil}},
		}
	}
	cases := []struct {
		name string
		opt  SampleOptions
		want []string // substrings of the error
	}{
		{"missing covariate", SampleOptions{Treatment: "t", Covariates: []string{"nope"}}, []string{`column "nope"`, "not found", "t, x, f, bin"}},
		{"missing treatment", SampleOptions{Treatment: "w", Covariates: []string{"f"}}, []string{`column "w"`, "treatment column not found"}},
		{"unsupported type", SampleOptions{Treatment: "t", Covariates: []string{"bin"}}, []string{`column "bin"`, "type binary"}},
		{"float treatment", SampleOptions{Treatment: "f", Covariates: []string{"t"}}, []string{`column "f"`, "float64", "0/1 integers"}},
		{"float categorical", SampleOptions{Treatment: "t", Covariates: []string{"f"}, Categorical: []string{"f"}}, []string{`column "f"`, "integer-coded"}},
		{"categorical not a covariate", SampleOptions{Treatment: "t", Covariates: []string{"f"}, Categorical: []string{"x"}}, []string{`"x" is not among the covariates`}},
		{"covariate is treatment", SampleOptions{Treatment: "t", Covariates: []string{"t"}}, []string{`"t" is both`}},
		{"infinite", SampleOptions{Treatment: "t", Covariates: []string{"x"}}, []string{"mem.parquet: row group 0: row 2", `column "x"`, "+Inf"}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			src := newMemSource(mkBatch(t, mem, base()...))
			_, err := ReadSample(context.Background(), src, c.opt)
			if err == nil {
				t.Fatal("no error")
			}
			for _, w := range c.want {
				if !strings.Contains(err.Error(), w) {
					t.Errorf("error %q lacks %q", err, w)
				}
			}
			var pe *pipeline.Error
			if strings.Contains(c.want[0], "column") && !errors.As(err, &pe) {
				t.Errorf("error %q is not a *pipeline.Error", err)
			}
		})
	}
}

// Later files may widen a numeric column (CSV inference makes int64 in one
// file and float64 in the next) but not change a categorical one's class.
func TestReadSampleTypeDrift(t *testing.T) {
	mem := memory.NewGoAllocator()
	first := mkBatch(t, mem, col{"t", arrow.PrimitiveTypes.Int64, anys(0, 1)}, col{"x", arrow.PrimitiveTypes.Int64, anys(1, 2)},
		col{"c", arrow.BinaryTypes.String, anys("a", "b")})
	widened := mkBatch(t, mem, col{"t", arrow.PrimitiveTypes.Int32, anys(0, 1)}, col{"x", arrow.PrimitiveTypes.Float64, anys(1.5, 2.5)},
		col{"c", dictString, anys("a", "b")})
	inf := mkBatch(t, mem, col{"t", arrow.PrimitiveTypes.Int64, anys(0, 1)}, col{"x", arrow.PrimitiveTypes.Float64, anys(1.5, math.Inf(1))},
		col{"c", arrow.BinaryTypes.String, anys("a", "b")})
	recoded := mkBatch(t, mem, col{"t", arrow.PrimitiveTypes.Int64, anys(0, 1)}, col{"x", arrow.PrimitiveTypes.Int64, anys(1, 2)},
		col{"c", arrow.PrimitiveTypes.Int64, anys(1, 2)})
	opt := SampleOptions{Treatment: "t", Covariates: []string{"x", "c"}}
	fr, err := ReadSample(context.Background(), newMemSource(first, widened), opt)
	if err != nil {
		t.Fatal(err)
	}
	if !slices.Equal(fr.Columns[0].Num, []float64{1, 2, 1.5, 2.5}) {
		t.Fatalf("x %v", fr.Columns[0].Num)
	}
	for _, c := range []struct {
		rec  arrow.RecordBatch
		want string
	}{{inf, "row group 1: row 3"}, {recoded, "int64 here but utf8"}} {
		_, err := ReadSample(context.Background(), newMemSource(first, c.rec), opt)
		if err == nil || !strings.Contains(err.Error(), c.want) {
			t.Errorf("error %v, want %q", err, c.want)
		}
	}
}

// BenchmarkReadSample: 16 batches of 65536 rows (id, t, lvl) into a
// reservoir of 10000.
func BenchmarkReadSample(b *testing.B) {
	mem := memory.NewGoAllocator()
	src := idSource(b, mem, 1<<20, 1<<16)
	b.SetBytes(1 << 20) // MB/s reads as million rows per second
	for b.Loop() {
		src.i, src.row = -1, 0
		if _, err := ReadSample(context.Background(), src, SampleOptions{Treatment: "t", Covariates: []string{"id", "lvl"}, SampleRows: 10000, Seed: 1}); err != nil {
			b.Fatal(err)
		}
	}
}
