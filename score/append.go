package score

import (
	"fmt"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/array"
	"github.com/apache/arrow-go/v18/arrow/bitutil"
	"github.com/apache/arrow-go/v18/arrow/memory"
	"github.com/heft-project/heft/fit"
)

// Columns names the appended columns. Predictions adds Mu0 and Mu1, the
// outcome models' predictions under control and treatment.
type Columns struct {
	Propensity  string `json:"propensity"`
	Weight      string `json:"weight"`
	InSupport   string `json:"in_support"`
	Mu0         string `json:"mu0,omitempty"`
	Mu1         string `json:"mu1,omitempty"`
	Predictions bool   `json:"-"`
}

// DefaultColumns returns the default names: propensity, weight, in_support,
// mu0, mu1 (the last two written only with Predictions).
func DefaultColumns() Columns {
	return Columns{Propensity: "propensity", Weight: "weight", InSupport: "in_support", Mu0: "mu0", Mu1: "mu1"}
}

// appended is one appended column: its name and the flag that renames it.
type appended struct{ name, flag string }

func (c Columns) appended() []appended {
	a := []appended{{c.Propensity, "--propensity-column"}, {c.Weight, "--weight-column"}, {c.InSupport, "--in-support-column"}}
	if c.Predictions {
		a = append(a, appended{c.Mu0, "--mu0-column"}, appended{c.Mu1, "--mu1-column"})
	}
	return a
}

// Check reports whether the names are usable and, with Predictions, that
// the model has outcome models to predict with. m may be nil to check the
// names only.
func (c Columns) Check(m *fit.Model) error {
	seen := map[string]string{}
	for _, a := range c.appended() {
		if a.name == "" {
			return fmt.Errorf("%s: the appended column needs a name", a.flag)
		}
		if f, dup := seen[a.name]; dup {
			return fmt.Errorf("%s and %s both name the appended column %q; rename one", f, a.flag, a.name)
		}
		seen[a.name] = a.flag
	}
	if c.Predictions && m != nil && m.Outcome == nil {
		return fmt.Errorf("--predictions: the model has no outcome models (fit it with an outcome column)")
	}
	return nil
}

// OutputSchema is the input schema, every field unchanged and in order,
// with metadata meta, plus the appended fields: propensity float64 (not
// null), weight float64 (nullable: null where the treatment is null),
// in_support bool (not null) and, with Predictions, mu0 and mu1 float64
// (not null). A name that clashes with an input column is an error naming
// it and the flag that renames the appended column.
func OutputSchema(in *arrow.Schema, c Columns, meta arrow.Metadata) (*arrow.Schema, error) {
	if err := c.Check(nil); err != nil {
		return nil, err
	}
	fields := make([]arrow.Field, 0, in.NumFields()+5)
	fields = append(fields, in.Fields()...)
	for _, a := range c.appended() {
		if len(in.FieldIndices(a.name)) > 0 {
			return nil, fmt.Errorf("column %q: the input already has a column of that name; choose another name for the appended column with %s", a.name, a.flag)
		}
	}
	f64 := arrow.PrimitiveTypes.Float64
	fields = append(fields,
		arrow.Field{Name: c.Propensity, Type: f64},
		arrow.Field{Name: c.Weight, Type: f64, Nullable: true},
		arrow.Field{Name: c.InSupport, Type: arrow.FixedWidthTypes.Boolean},
	)
	if c.Predictions {
		fields = append(fields, arrow.Field{Name: c.Mu0, Type: f64}, arrow.Field{Name: c.Mu1, Type: f64})
	}
	return arrow.NewSchema(fields, &meta), nil
}

// Append returns a new record batch: the first keep columns of rec (the
// same arrays, retained, not copied; keep < rec.NumCols() drops trailing
// partition columns) followed by the columns built from sc with mem.
// keep ≤ 0 or beyond rec's columns keeps them all. schema is the output
// schema (OutputSchema of the kept input columns); sc must hold rec's rows,
// with Mu0 and Mu1 when c.Predictions (Stage checks both). The caller
// releases the result; rec is unchanged.
func Append(mem memory.Allocator, schema *arrow.Schema, rec arrow.RecordBatch, keep int, sc *Scores, c Columns) arrow.RecordBatch {
	if keep <= 0 || keep > int(rec.NumCols()) {
		keep = int(rec.NumCols())
	}
	cols := make([]arrow.Array, 0, keep+5)
	for i := 0; i < keep; i++ {
		cols = append(cols, rec.Column(i))
	}
	built := appendedArrays(mem, sc, c)
	cols = append(cols, built...)
	out := array.NewRecordBatch(schema, cols, int64(sc.N))
	for _, a := range built {
		a.Release()
	}
	return out
}

// Appended returns a record batch of the appended columns alone, built from
// sc with mem; schema is OutputSchema of an empty input. It is what a
// splicing sink takes, which copies the input's columns as bytes.
func Appended(mem memory.Allocator, schema *arrow.Schema, sc *Scores, c Columns) arrow.RecordBatch {
	built := appendedArrays(mem, sc, c)
	out := array.NewRecordBatch(schema, built, int64(sc.N))
	for _, a := range built {
		a.Release()
	}
	return out
}

func appendedArrays(mem memory.Allocator, sc *Scores, c Columns) []arrow.Array {
	n := sc.N
	built := []arrow.Array{
		float64Array(mem, sc.E[:n], nil),
		float64Array(mem, sc.W[:n], sc.WValid[:n]),
		boolArray(mem, sc.InSupport[:n]),
	}
	if c.Predictions {
		built = append(built, float64Array(mem, sc.Mu0[:n], nil), float64Array(mem, sc.Mu1[:n], nil))
	}
	return built
}

// float64Array copies v into one buffer from mem and wraps it as an array,
// with a validity bitmap only when some valid[i] is false (valid nil: all
// valid). One copy beats appending value by value through a builder.
func float64Array(mem memory.Allocator, v []float64, valid []bool) *array.Float64 {
	n := len(v)
	data := memory.NewResizableBuffer(mem)
	data.Resize(n * arrow.Float64SizeBytes)
	copy(arrow.Float64Traits.CastFromBytes(data.Bytes()), v)
	var bitmap *memory.Buffer
	nulls := 0
	for _, ok := range valid {
		if !ok {
			nulls++
		}
	}
	if nulls > 0 {
		bitmap = bitsOf(mem, valid)
	}
	d := array.NewData(arrow.PrimitiveTypes.Float64, n, []*memory.Buffer{bitmap, data}, nil, nulls, 0)
	a := array.NewFloat64Data(d)
	d.Release()
	data.Release()
	if bitmap != nil {
		bitmap.Release()
	}
	return a
}

func boolArray(mem memory.Allocator, v []bool) *array.Boolean {
	bits := bitsOf(mem, v)
	d := array.NewData(arrow.FixedWidthTypes.Boolean, len(v), []*memory.Buffer{nil, bits}, nil, 0, 0)
	a := array.NewBooleanData(d)
	d.Release()
	bits.Release()
	return a
}

// bitsOf packs v into an Arrow bitmap (least significant bit first).
func bitsOf(mem memory.Allocator, v []bool) *memory.Buffer {
	buf := memory.NewResizableBuffer(mem)
	buf.Resize(int(bitutil.BytesForBits(int64(len(v)))))
	b := buf.Bytes()
	for i := range b {
		b[i] = 0
	}
	for i, ok := range v {
		if ok {
			b[i>>3] |= 1 << (uint(i) & 7)
		}
	}
	return buf
}
