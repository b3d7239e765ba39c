// Command gen writes the bad-input files under testdata/bad/ that
// cmd/heft/bad_input_test.go feeds to heft. The data are invented; every file
// is a small variation of one table (good.parquet) so that each shows one
// fault. The output is byte-identical on every run:
//
//	go run ./testdata/bad/gen
//
// from the repository root (or pass the directory to write as an argument).
package main

import (
	"bytes"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/array"
	"github.com/apache/arrow-go/v18/arrow/memory"
	"github.com/apache/arrow-go/v18/parquet"
	"github.com/apache/arrow-go/v18/parquet/compress"
	"github.com/apache/arrow-go/v18/parquet/file"
	"github.com/apache/arrow-go/v18/parquet/pqarrow"
)

// rows of the base table, in two row groups.
const (
	rows         = 400
	rowGroupRows = 200
)

func main() {
	dir := "testdata/bad"
	if len(os.Args) > 1 {
		dir = os.Args[1]
	}
	if err := write(dir); err != nil {
		fmt.Fprintln(os.Stderr, "gen:", err)
		os.Exit(1)
	}
}

// col is one column of a generated table.
type col struct {
	name string
	arr  arrow.Array
}

// base draws the columns of the good table: numeric x1 (float64), x2
// (int64), a string categorical grp with levels a, b, c, a 0/1 treatment t
// that depends on x1 and grp, and an outcome y.
type base struct {
	x1, y []float64
	x2    []int64
	grp   []string
	t     []int64
}

func draw() base {
	r := rand.New(rand.NewPCG(20261201, 0xbad))
	var b base
	levels := []string{"a", "b", "c"}
	for i := 0; i < rows; i++ {
		x1 := r.NormFloat64()
		x2 := int64(r.IntN(60) + 20)
		g := levels[r.IntN(3)]
		lin := -0.2 + 0.8*x1 + 0.01*float64(x2-50)
		if g == "b" {
			lin += 0.5
		}
		t := int64(0)
		if r.Float64() < 1/(1+math.Exp(-lin)) {
			t = 1
		}
		b.x1 = append(b.x1, x1)
		b.x2 = append(b.x2, x2)
		b.grp = append(b.grp, g)
		b.t = append(b.t, t)
		b.y = append(b.y, 10+2*x1+0.1*float64(x2)+3*float64(t)+r.NormFloat64())
	}
	return b
}

var mem = memory.NewGoAllocator()

func floats(v []float64, null func(i int) bool) arrow.Array {
	b := array.NewFloat64Builder(mem)
	defer b.Release()
	for i, x := range v {
		if null != nil && null(i) {
			b.AppendNull()
		} else {
			b.Append(x)
		}
	}
	return b.NewArray()
}

func ints(v []int64, null func(i int) bool) arrow.Array {
	b := array.NewInt64Builder(mem)
	defer b.Release()
	for i, x := range v {
		if null != nil && null(i) {
			b.AppendNull()
		} else {
			b.Append(x)
		}
	}
	return b.NewArray()
}

func strs(v []string) arrow.Array {
	b := array.NewStringBuilder(mem)
	defer b.Release()
	b.AppendValues(v, nil)
	return b.NewArray()
}

func (b base) cols() []col {
	return []col{
		{"x1", floats(b.x1, nil)},
		{"x2", ints(b.x2, nil)},
		{"grp", strs(b.grp)},
		{"t", ints(b.t, nil)},
		{"y", floats(b.y, nil)},
	}
}

// replace returns cs with the column called name replaced by arr.
func replace(cs []col, name string, arr arrow.Array) []col {
	out := append([]col(nil), cs...)
	for i := range out {
		if out[i].name == name {
			out[i].arr = arr
			return out
		}
	}
	panic("no column " + name)
}

func drop(cs []col, name string) []col {
	var out []col
	for _, c := range cs {
		if c.name != name {
			out = append(out, c)
		}
	}
	return out
}

func rename(cs []col, names map[string]string) []col {
	out := append([]col(nil), cs...)
	for i := range out {
		if n, ok := names[out[i].name]; ok {
			out[i].name = n
		}
	}
	return out
}

// head keeps the first n rows.
func head(cs []col, n int) []col {
	out := make([]col, len(cs))
	for i, c := range cs {
		out[i] = col{c.name, array.NewSlice(c.arr, 0, int64(n))}
	}
	return out
}

// parquetBytes writes cs as one Parquet file: snappy, plain encoding (no
// dictionary) so that a data page's bytes are the values themselves.
func parquetBytes(cs []col) ([]byte, error) {
	fields := make([]arrow.Field, len(cs))
	arrs := make([]arrow.Array, len(cs))
	n := int64(0)
	for i, c := range cs {
		fields[i] = arrow.Field{Name: c.name, Type: c.arr.DataType(), Nullable: true}
		arrs[i] = c.arr
		n = int64(c.arr.Len())
	}
	schema := arrow.NewSchema(fields, nil)
	rec := array.NewRecordBatch(schema, arrs, n)
	defer rec.Release()
	var buf bytes.Buffer
	props := parquet.NewWriterProperties(
		parquet.WithCompression(compress.Codecs.Snappy),
		parquet.WithDictionaryDefault(false),
		parquet.WithMaxRowGroupLength(rowGroupRows),
		parquet.WithCreatedBy("heft testdata/bad/gen"),
	)
	w, err := pqarrow.NewFileWriter(schema, &buf, props, pqarrow.NewArrowWriterProperties(pqarrow.WithStoreSchema()))
	if err != nil {
		return nil, err
	}
	if n > 0 {
		if err := w.WriteBuffered(rec); err != nil {
			return nil, err
		}
	}
	if err := w.Close(); err != nil {
		return nil, err
	}
	return buf.Bytes(), nil
}

// chunkOffset returns where column col's chunk of row group rg starts and
// how long it is.
func chunkOffset(b []byte, rg, col int) (int64, int64, error) {
	r, err := file.NewParquetReader(bytes.NewReader(b))
	if err != nil {
		return 0, 0, err
	}
	defer r.Close()
	cc, err := r.MetaData().RowGroup(rg).ColumnChunk(col)
	if err != nil {
		return 0, 0, err
	}
	return cc.DataPageOffset(), cc.TotalCompressedSize(), nil
}

func write(dir string) error {
	if err := os.MkdirAll(filepath.Join(dir, "mixed"), 0o755); err != nil {
		return err
	}
	b := draw()
	good := b.cols()
	files := map[string][]byte{}
	add := func(name string, cs []col) error {
		p, err := parquetBytes(cs)
		if err != nil {
			return fmt.Errorf("%s: %w", name, err)
		}
		files[name] = p
		return nil
	}
	goodBytes, err := parquetBytes(good)
	if err != nil {
		return err
	}
	files["good.parquet"] = goodBytes

	// Files.
	files["empty.parquet"] = nil
	files["not_parquet.parquet"] = []byte("x1,x2,grp,t,y\n0.5,30,a,1,12.5\n")
	files["truncated_footer.parquet"] = goodBytes[:len(goodBytes)-24]
	off, size, err := chunkOffset(goodBytes, 1, 0)
	if err != nil {
		return err
	}
	files["truncated_rowgroup.parquet"] = goodBytes[:off+size/2]
	// Overwrite the page header of x1's chunk in row group 1: the footer is
	// intact, the page cannot be decoded.
	corrupt := bytes.Clone(goodBytes)
	for i := off; i < off+8; i++ {
		corrupt[i] = 0xff
	}
	files["corrupt_page.parquet"] = corrupt
	// Flip bytes in the middle of the snappy payload of grp's chunk in row
	// group 0: the page header is intact, decompression or decoding fails.
	off2, size2, err := chunkOffset(goodBytes, 0, 2)
	if err != nil {
		return err
	}
	flipped := bytes.Clone(goodBytes)
	for i := off2 + size2/2; i < off2+size2/2+16; i++ {
		flipped[i] ^= 0xa5
	}
	files["corrupt_payload.parquet"] = flipped
	steps := []struct {
		name string
		cs   []col
	}{
		{"zero_rows.parquet", head(good, 0)},
		{"mixed/part-0.parquet", head(good, 200)},
		{"mixed/part-1.parquet", replace(head(good, 200), "x2", floats(make([]float64, 200), nil))},

		// Columns.
		{"missing_covariate.parquet", drop(good, "x2")},
		{"wrong_type.parquet", replace(good, "x1", strs(fmtFloats(b.x1)))},
		{"treatment_1_2.parquet", replace(good, "t", ints(plus(b.t, 1), nil))},
		{"treatment_strings.parquet", replace(good, "t", strs(threeStrings(b.t)))},
		{"treatment_constant.parquet", replace(good, "t", ints(make([]int64, rows), nil))},
		{"treatment_null.parquet", replace(good, "t", ints(b.t, func(int) bool { return true }))},
		{"covariate_null.parquet", replace(good, "x1", floats(b.x1, func(i int) bool { return i == 257 }))},
		{"covariate_nan.parquet", replace(good, "x1", floats(with(b.x1, 123, math.NaN()), nil))},
		{"covariate_inf.parquet", replace(good, "x1", floats(with(b.x1, 301, math.Inf(1)), nil))},
		{"covariate_neginf.parquet", replace(good, "x1", floats(with(b.x1, 42, math.Inf(-1)), nil))},
		{"unseen_level.parquet", replace(good, "grp", strs(withStr(b.grp, 250, "zz")))},
		{"odd_names.parquet", rename(good, map[string]string{"x1": "floor area", "x2": "región", "grp": "a.b"})},
		{"duplicate_names.parquet", rename(good, map[string]string{"y": "x1"})},
		{"types_changed.parquet", replace(replace(good, "x2", strs(fmtInts(b.x2))), "grp", ints(levelCodes(b.grp), nil))},

		// Fitting.
		{"one_row.parquet", head(good, 1)},
		{"separation.parquet", replace(good, "t", ints(above(b.x1, 0), nil))},
		{"collinear.parquet", append(good, col{"x3", floats(scale(b.x1, 2, 1), nil)})},
		{"few_rows.parquet", head(wide(b), 4)},
	}
	for _, s := range steps {
		if err := add(s.name, s.cs); err != nil {
			return err
		}
	}
	// A CSV sample whose data row 17 (line 19) has one field too many.
	var csv bytes.Buffer
	csv.WriteString("x1,x2,grp,t,y\n")
	for i := 0; i < 40; i++ {
		fmt.Fprintf(&csv, "%v,%d,%s,%d,%v", b.x1[i], b.x2[i], b.grp[i], b.t[i], b.y[i])
		if i == 17 {
			csv.WriteString(",7")
		}
		csv.WriteString("\n")
	}
	files["ragged.csv"] = csv.Bytes()
	// A CSV sample with a word in data row 17 of a numeric column: the
	// column is read as text.
	var word bytes.Buffer
	word.WriteString("x1,x2,grp,t,y\n")
	for i := 0; i < 40; i++ {
		x1 := fmt.Sprint(b.x1[i])
		if i == 17 {
			x1 = "n/a?"
		}
		fmt.Fprintf(&word, "%s,%d,%s,%d,%v\n", x1, b.x2[i], b.grp[i], b.t[i], b.y[i])
	}
	files["word_in_numbers.csv"] = word.Bytes()

	for name, data := range files {
		if err := os.WriteFile(filepath.Join(dir, name), data, 0o644); err != nil {
			return err
		}
	}
	if len(files) == 0 {
		return errors.New("nothing written")
	}
	return nil
}

func fmtFloats(v []float64) []string {
	out := make([]string, len(v))
	for i, x := range v {
		out[i] = fmt.Sprint(x)
	}
	return out
}

func fmtInts(v []int64) []string {
	out := make([]string, len(v))
	for i, x := range v {
		out[i] = fmt.Sprint(x)
	}
	return out
}

func plus(v []int64, k int64) []int64 {
	out := make([]int64, len(v))
	for i, x := range v {
		out[i] = x + k
	}
	return out
}

func threeStrings(t []int64) []string {
	out := make([]string, len(t))
	for i, x := range t {
		out[i] = []string{"no", "yes"}[x]
		if i%7 == 3 {
			out[i] = "maybe"
		}
	}
	return out
}

func with(v []float64, i int, x float64) []float64 {
	out := append([]float64(nil), v...)
	out[i] = x
	return out
}

func withStr(v []string, i int, x string) []string {
	out := append([]string(nil), v...)
	out[i] = x
	return out
}

func levelCodes(g []string) []int64 {
	out := make([]int64, len(g))
	for i, s := range g {
		out[i] = int64(s[0] - 'a')
	}
	return out
}

func above(v []float64, c float64) []int64 {
	out := make([]int64, len(v))
	for i, x := range v {
		if x > c {
			out[i] = 1
		}
	}
	return out
}

func scale(v []float64, a, c float64) []float64 {
	out := make([]float64, len(v))
	for i, x := range v {
		out[i] = a*x + c
	}
	return out
}

// wide has six numeric covariates x1..x6 and the treatment alternating, for
// a fit with more terms than rows.
func wide(b base) []col {
	r := rand.New(rand.NewPCG(7, 7))
	cs := []col{}
	for k := 1; k <= 6; k++ {
		v := make([]float64, rows)
		for i := range v {
			v[i] = r.NormFloat64()
		}
		cs = append(cs, col{fmt.Sprintf("x%d", k), floats(v, nil)})
	}
	t := make([]int64, rows)
	for i := range t {
		t[i] = int64(i % 2)
	}
	return append(cs, col{"t", ints(t, nil)})
}
