package main

import (
	"encoding/json"
	"errors"
	"io"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/apache/arrow-go/v18/arrow/array"
	"github.com/apache/arrow-go/v18/arrow/ipc"
	pq "github.com/parquet-go/parquet-go"
)

// A scored Parquet file, read back with parquet-go (a Parquet
// implementation heft does not write with), holds the same rows as the
// Arrow stream heft writes for the same input: every input column and the
// appended propensity, weight and in_support, value for value.
func TestScoredParquetReadsBackWithParquetGo(t *testing.T) {
	dir, model, paths := demoData(t, 20000, 1)
	out := filepath.Join(dir, "scored.parquet")
	mustHeft(t, "score", "-q", "--model", model, "--clip", "0.001", "--trim", "0.02", "-o", out, paths[0])
	stream := mustHeft(t, "score", "-q", "--model", model, "--clip", "0.001", "--trim", "0.02", "-o", "-", paths[0])

	rd, err := ipc.NewReader(strings.NewReader(stream.stdout))
	if err != nil {
		t.Fatal(err)
	}
	defer rd.Release()
	schema := rd.Schema()

	f, err := os.Open(out)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	pr := pq.NewReader(f)
	defer pr.Close()
	cols := pr.Schema().Columns()
	if len(cols) != schema.NumFields() {
		t.Fatalf("parquet-go sees %d columns, the stream %d", len(cols), schema.NumFields())
	}
	// parquet-go orders a row's values by leaf column; map each to the
	// stream's field by name.
	idx := make([]int, len(cols))
	for k, c := range cols {
		i := schema.FieldIndices(c[0])
		if len(i) != 1 {
			t.Fatalf("column %q of the Parquet file is not in the stream", c[0])
		}
		idx[k] = i[0]
	}
	rows := make([]pq.Row, 1)
	var n int64
	for rd.Next() {
		rec := rd.RecordBatch()
		for r := 0; r < int(rec.NumRows()); r++ {
			if _, err := pr.ReadRows(rows); err != nil && !errors.Is(err, io.EOF) {
				t.Fatal(err)
			}
			for k, v := range rows[0] {
				col := rec.Column(idx[k])
				if !sameValue(col, r, v) {
					t.Fatalf("row %d column %q: parquet-go %v, stream %v", n, cols[k][0], v, col.ValueStr(r))
				}
			}
			n++
		}
	}
	if n != 20000 {
		t.Fatalf("%d rows", n)
	}
}

func sameValue(col interface {
	IsNull(int) bool
}, r int, v pq.Value) bool {
	if col.IsNull(r) || v.IsNull() {
		return col.IsNull(r) == v.IsNull()
	}
	switch a := col.(type) {
	case *array.Float64:
		return math.Float64bits(a.Value(r)) == math.Float64bits(v.Double())
	case *array.Int64:
		return a.Value(r) == v.Int64()
	case *array.Int32:
		return a.Value(r) == v.Int32()
	case *array.Int8:
		return int32(a.Value(r)) == v.Int32()
	case *array.Boolean:
		return a.Value(r) == v.Boolean()
	case *array.String:
		return a.Value(r) == string(v.ByteArray())
	}
	return false
}

// Every row's propensity and weight equal a computation straight from the
// coefficients that `heft inspect --json` prints, done here with plain
// float64 arithmetic over the input's own columns (term "column=level" is 1
// where the column's text is level), to 1e-12.
func TestScoresEqualTheCoefficients(t *testing.T) {
	_, model, paths := demoData(t, 20000, 1)
	var coef struct {
		Propensity struct {
			Terms []struct {
				Name string  `json:"name"`
				Coef float64 `json:"coef"`
			} `json:"terms"`
		} `json:"propensity"`
	}
	if err := json.Unmarshal([]byte(mustHeft(t, "inspect", "--json", model).stdout), &coef); err != nil {
		t.Fatal(err)
	}
	stream := mustHeft(t, "score", "-q", "--model", model, "--estimand", "att", "--clip", "0.001", "-o", "-", paths[0])
	rd, err := ipc.NewReader(strings.NewReader(stream.stdout))
	if err != nil {
		t.Fatal(err)
	}
	defer rd.Release()
	s := rd.Schema()
	for rd.Next() {
		rec := rd.RecordBatch()
		text := func(name string, r int) (string, float64) {
			switch a := rec.Column(s.FieldIndices(name)[0]).(type) {
			case *array.String:
				return a.Value(r), math.NaN()
			case *array.Boolean:
				if a.Value(r) {
					return "true", math.NaN()
				}
				return "false", math.NaN()
			case *array.Float64:
				return "", a.Value(r)
			case *array.Int32:
				return "", float64(a.Value(r))
			}
			t.Fatalf("column %s: unexpected type", name)
			return "", 0
		}
		e := rec.Column(s.FieldIndices("propensity")[0]).(*array.Float64)
		w := rec.Column(s.FieldIndices("weight")[0]).(*array.Float64)
		tr := rec.Column(s.FieldIndices("audit")[0]).(*array.Int8)
		for r := 0; r < int(rec.NumRows()); r++ {
			lp := 0.0
			for _, term := range coef.Propensity.Terms {
				switch col, level, isLevel := strings.Cut(term.Name, "="); {
				case term.Name == "intercept":
					lp += term.Coef
				case isLevel:
					if v, _ := text(col, r); v == level {
						lp += term.Coef
					}
				default:
					_, v := text(term.Name, r)
					lp += term.Coef * v
				}
			}
			want := 1 / (1 + math.Exp(-lp))
			want = math.Min(math.Max(want, 0.001), 0.999)
			wantW := 1.0 // ATT: treated 1, control e/(1−e)
			if tr.Value(r) == 0 {
				wantW = want / (1 - want)
			}
			if math.Abs(e.Value(r)-want) > 1e-12*want || math.Abs(w.Value(r)-wantW) > 1e-12*wantW {
				t.Fatalf("row %d: heft e=%v w=%v, from the coefficients e=%v w=%v", r, e.Value(r), w.Value(r), want, wantW)
			}
		}
	}
}
