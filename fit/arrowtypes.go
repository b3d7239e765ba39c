package fit

import (
	"math"
	"strconv"
	"strings"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/array"
)

// class groups Arrow types by how heft reads them. A column keeps its class
// between fit and score; the width within a class may change.
type class int

const (
	classUnsupported class = iota
	classInt               // int8 … int64
	classUint              // uint8 … uint64
	classFloat             // float16, float32, float64
	classString            // utf8, large_utf8, utf8_view, dictionary of those
	classBool
)

func (c class) String() string {
	switch c {
	case classInt, classUint:
		return "integer"
	case classFloat:
		return "floating-point"
	case classString:
		return "string"
	case classBool:
		return "boolean"
	}
	return "unsupported"
}

func (c class) numeric() bool { return c == classInt || c == classUint || c == classFloat }

func classOf(dt arrow.DataType) class {
	switch dt.ID() {
	case arrow.INT8, arrow.INT16, arrow.INT32, arrow.INT64:
		return classInt
	case arrow.UINT8, arrow.UINT16, arrow.UINT32, arrow.UINT64:
		return classUint
	case arrow.FLOAT16, arrow.FLOAT32, arrow.FLOAT64:
		return classFloat
	case arrow.STRING, arrow.LARGE_STRING, arrow.STRING_VIEW:
		return classString
	case arrow.BOOL:
		return classBool
	case arrow.DICTIONARY:
		switch dt.(*arrow.DictionaryType).ValueType.ID() {
		case arrow.STRING, arrow.LARGE_STRING, arrow.STRING_VIEW:
			return classString
		}
	}
	return classUnsupported
}

// classOfName recovers the class from a type name stored in a model file.
func classOfName(name string) class {
	switch name {
	case "int8", "int16", "int32", "int64":
		return classInt
	case "uint8", "uint16", "uint32", "uint64":
		return classUint
	case "float16", "float32", "float64":
		return classFloat
	case "utf8", "large_utf8", "utf8_view":
		return classString
	case "bool":
		return classBool
	}
	if strings.HasPrefix(name, "dictionary<values=utf8") ||
		strings.HasPrefix(name, "dictionary<values=large_utf8") ||
		strings.HasPrefix(name, "dictionary<values=utf8_view") {
		return classString
	}
	return classUnsupported
}

// typeName is the Arrow type name recorded in the model file.
func typeName(dt arrow.DataType) string { return dt.String() }

type number interface {
	~int8 | ~int16 | ~int32 | ~int64 | ~uint8 | ~uint16 | ~uint32 | ~uint64 | ~float32 | ~float64
}

func widen[T number](vals []T, out []float64) {
	out = out[:len(vals)]
	for i, v := range vals {
		out[i] = float64(v)
	}
}

// floatsOf writes arr as float64 into out (len ≥ arr.Len()), NaN where null.
// ok is false when arr is not of a numeric or boolean type.
func floatsOf(arr arrow.Array, out []float64) (ok bool) {
	n := arr.Len()
	out = out[:n]
	switch a := arr.(type) {
	case *array.Float64:
		copy(out, a.Float64Values())
	case *array.Float32:
		widen(a.Float32Values(), out)
	case *array.Float16:
		for i, v := range a.Values() {
			out[i] = float64(v.Float32())
		}
	case *array.Int64:
		widen(a.Int64Values(), out)
	case *array.Int32:
		widen(a.Int32Values(), out)
	case *array.Int16:
		widen(a.Int16Values(), out)
	case *array.Int8:
		widen(a.Int8Values(), out)
	case *array.Uint64:
		widen(a.Uint64Values(), out)
	case *array.Uint32:
		widen(a.Uint32Values(), out)
	case *array.Uint16:
		widen(a.Uint16Values(), out)
	case *array.Uint8:
		widen(a.Uint8Values(), out)
	case *array.Boolean:
		for i := range n {
			if a.Value(i) {
				out[i] = 1
			} else {
				out[i] = 0
			}
		}
	default:
		return false
	}
	if arr.NullN() > 0 {
		for i := range n {
			if arr.IsNull(i) {
				out[i] = math.NaN()
			}
		}
	}
	return true
}

// textAt is row i of arr as text: decimal for integers, shortest round-trip
// form for floats, "true"/"false" for booleans. Not for hot loops.
func textAt(arr arrow.Array, i int) string {
	switch a := arr.(type) {
	case *array.String:
		return a.Value(i)
	case *array.LargeString:
		return a.Value(i)
	case *array.StringView:
		return a.Value(i)
	case *array.Boolean:
		return strconv.FormatBool(a.Value(i))
	case *array.Dictionary:
		return textAt(a.Dictionary(), a.GetValueIndex(i))
	case *array.Int64:
		return strconv.FormatInt(a.Value(i), 10)
	case *array.Int32:
		return strconv.FormatInt(int64(a.Value(i)), 10)
	case *array.Int16:
		return strconv.FormatInt(int64(a.Value(i)), 10)
	case *array.Int8:
		return strconv.FormatInt(int64(a.Value(i)), 10)
	case *array.Uint64:
		return strconv.FormatUint(a.Value(i), 10)
	case *array.Uint32:
		return strconv.FormatUint(uint64(a.Value(i)), 10)
	case *array.Uint16:
		return strconv.FormatUint(uint64(a.Value(i)), 10)
	case *array.Uint8:
		return strconv.FormatUint(uint64(a.Value(i)), 10)
	case *array.Float64:
		return strconv.FormatFloat(a.Value(i), 'g', -1, 64)
	case *array.Float32:
		return strconv.FormatFloat(float64(a.Value(i)), 'g', -1, 32)
	case *array.Float16:
		return strconv.FormatFloat(float64(a.Value(i).Float32()), 'g', -1, 32)
	}
	return arr.ValueStr(i)
}

// stringValue returns the accessor of a plain (non-dictionary) string array.
func stringValue(arr arrow.Array) (func(int) string, bool) {
	switch a := arr.(type) {
	case *array.String:
		return a.Value, true
	case *array.LargeString:
		return a.Value, true
	case *array.StringView:
		return a.Value, true
	}
	return nil, false
}

// dictIndices returns a function giving the dictionary index of row i.
func dictIndices(d *array.Dictionary) func(int) int {
	switch ix := d.Indices().(type) {
	case *array.Int8:
		v := ix.Int8Values()
		return func(i int) int { return int(v[i]) }
	case *array.Int16:
		v := ix.Int16Values()
		return func(i int) int { return int(v[i]) }
	case *array.Int32:
		v := ix.Int32Values()
		return func(i int) int { return int(v[i]) }
	case *array.Int64:
		v := ix.Int64Values()
		return func(i int) int { return int(v[i]) }
	case *array.Uint8:
		v := ix.Uint8Values()
		return func(i int) int { return int(v[i]) }
	case *array.Uint16:
		v := ix.Uint16Values()
		return func(i int) int { return int(v[i]) }
	case *array.Uint32:
		v := ix.Uint32Values()
		return func(i int) int { return int(v[i]) }
	case *array.Uint64:
		v := ix.Uint64Values()
		return func(i int) int { return int(v[i]) }
	}
	return d.GetValueIndex
}

// intsOf returns a function giving row i of an integer array as int64 and
// whether it fits (uint64 above MaxInt64 does not).
func intsOf(arr arrow.Array) (func(int) (int64, bool), bool) {
	switch a := arr.(type) {
	case *array.Int64:
		v := a.Int64Values()
		return func(i int) (int64, bool) { return v[i], true }, true
	case *array.Int32:
		v := a.Int32Values()
		return func(i int) (int64, bool) { return int64(v[i]), true }, true
	case *array.Int16:
		v := a.Int16Values()
		return func(i int) (int64, bool) { return int64(v[i]), true }, true
	case *array.Int8:
		v := a.Int8Values()
		return func(i int) (int64, bool) { return int64(v[i]), true }, true
	case *array.Uint64:
		v := a.Uint64Values()
		return func(i int) (int64, bool) { return int64(v[i]), v[i] <= math.MaxInt64 }, true
	case *array.Uint32:
		v := a.Uint32Values()
		return func(i int) (int64, bool) { return int64(v[i]), true }, true
	case *array.Uint16:
		v := a.Uint16Values()
		return func(i int) (int64, bool) { return int64(v[i]), true }, true
	case *array.Uint8:
		v := a.Uint8Values()
		return func(i int) (int64, bool) { return int64(v[i]), true }, true
	}
	return nil, false
}
