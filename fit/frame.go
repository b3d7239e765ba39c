package fit

import (
	"fmt"
	"math"
	"strings"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/array"

	"github.com/heft-project/heft/pipeline"
)

// Frame is the fit sample held in memory: only the columns the model needs.
// Numeric columns are []float64 with NaN where missing; categorical columns
// (and the treatment, whose arms are decided later by Fit) are int32 codes
// into a per-column dictionary of level texts. Memory is rows × columns.
//
// Rows whose treatment is null cannot enter any fit; ReadSample skips them
// (counting them in NullTreatment) and samples among the rest.
type Frame struct {
	Schema        []Field // the input schema, every column
	RowsRead      int64   // rows seen in the input, including null-treatment rows
	NullTreatment int64   // rows skipped because their treatment was null
	Sampled       bool    // reservoir-sampled (else every usable row)
	Seed          uint64

	Treatment FrameColumn
	Outcome   *FrameColumn  // nil without an outcome
	Columns   []FrameColumn // covariates, in SampleOptions.Covariates order

	n int
	// Where each row came from, for error messages: origins[originIdx[i]]
	// is its file and row group, originRow[i] its row in that file.
	origins   []origin
	originIdx []int32
	originRow []int64
}

type origin struct {
	file     string
	rowGroup int
}

// FrameColumn is one column of the fit sample.
type FrameColumn struct {
	Name string
	Type string // Arrow type name in the input
	Kind string // KindNumeric or KindCategorical
	// Num holds a numeric column (and the outcome), NaN where missing.
	Num []float64
	// Codes index Dict for a categorical column (and the treatment); -1 where missing.
	Codes []int32
	Dict  []string

	cls   class
	index map[string]int32 // Dict inverted, while reading
	col   int              // position in the current input schema
}

// N is the number of rows in the frame.
func (fr *Frame) N() int { return fr.n }

// Origin locates row i of the frame in the input (RowGroup is the row's
// group, Row its file-relative row).
func (fr *Frame) Origin(i int) pipeline.Location {
	if i < 0 || i >= len(fr.originIdx) {
		return pipeline.Location{RowGroup: -1}
	}
	o := fr.origins[fr.originIdx[i]]
	return pipeline.Location{File: o.file, RowGroup: o.rowGroup, Row: fr.originRow[i]}
}

// errAt builds a located error for row i of the frame.
func (fr *Frame) errAt(i int, column string, err error) *pipeline.Error {
	l := fr.Origin(i)
	row := l.Row
	if l.File == "" && l.RowGroup < 0 {
		row = -1
	}
	return &pipeline.Error{File: l.File, RowGroup: l.RowGroup, Row: row, Column: column, Err: err}
}

// Missing counts the missing rows of a column and returns the first one (-1 if none).
func (c *FrameColumn) Missing() (count, first int) {
	first = -1
	if c.Kind == KindNumeric {
		for i, v := range c.Num {
			if math.IsNaN(v) {
				if first < 0 {
					first = i
				}
				count++
			}
		}
		return count, first
	}
	for i, v := range c.Codes {
		if v < 0 {
			if first < 0 {
				first = i
			}
			count++
		}
	}
	return count, first
}

// intern returns the code of level s, adding it if new. The key is cloned:
// s may point into an Arrow buffer that is about to be released.
func (c *FrameColumn) intern(s string) int32 {
	if k, ok := c.index[s]; ok {
		return k
	}
	s = strings.Clone(s)
	k := int32(len(c.Dict))
	c.Dict = append(c.Dict, s)
	c.index[s] = k
	return k
}

// compact drops dictionary entries no row uses any more (replaced rows).
func (c *FrameColumn) compact() {
	used := make([]int32, len(c.Dict))
	for i := range used {
		used[i] = -1
	}
	var dict []string
	for i, k := range c.Codes {
		if k < 0 {
			continue
		}
		if used[k] < 0 {
			used[k] = int32(len(dict))
			dict = append(dict, c.Dict[k])
		}
		c.Codes[i] = used[k]
	}
	c.Dict = dict
	c.index = make(map[string]int32, len(dict))
	for k, s := range dict {
		c.index[s] = int32(k)
	}
}

// take stores the rows of arr selected by slots (slot s ≥ 0: row i goes to
// frame row s, appended when s is the current length). num is scratch for
// numeric conversion, already filled when the column is numeric.
func (c *FrameColumn) take(arr arrow.Array, slots []int32, num []float64) {
	if c.Kind == KindNumeric {
		for i, s := range slots {
			if s < 0 {
				continue
			}
			if int(s) == len(c.Num) {
				c.Num = append(c.Num, num[i])
			} else {
				c.Num[s] = num[i]
			}
		}
		return
	}
	put := func(s int32, k int32) {
		if int(s) == len(c.Codes) {
			c.Codes = append(c.Codes, k)
		} else {
			c.Codes[s] = k
		}
	}
	switch a := arr.(type) {
	case *array.Dictionary:
		// Map each dictionary entry once per batch, lazily.
		dict := a.Dictionary()
		codes := make([]int32, dict.Len())
		for i := range codes {
			codes[i] = -2
		}
		idx := dictIndices(a)
		for i, s := range slots {
			if s < 0 {
				continue
			}
			if a.IsNull(i) {
				put(s, -1)
				continue
			}
			d := idx(i)
			if codes[d] == -2 {
				if dict.IsNull(d) {
					codes[d] = -1
				} else {
					codes[d] = c.intern(textAt(dict, d))
				}
			}
			put(s, codes[d])
		}
	case *array.Boolean:
		var f, t int32 = -2, -2
		for i, s := range slots {
			if s < 0 {
				continue
			}
			switch {
			case a.IsNull(i):
				put(s, -1)
			case a.Value(i):
				if t == -2 {
					t = c.intern("true")
				}
				put(s, t)
			default:
				if f == -2 {
					f = c.intern("false")
				}
				put(s, f)
			}
		}
	default:
		str, isStr := stringValue(arr)
		for i, s := range slots {
			if s < 0 {
				continue
			}
			switch {
			case arr.IsNull(i):
				put(s, -1)
			case isStr:
				put(s, c.intern(str(i)))
			default:
				t := textAt(arr, i)
				if c.cls == classFloat && t == "NaN" {
					put(s, -1)
					continue
				}
				put(s, c.intern(t))
			}
		}
	}
}

// newFrameColumn checks that field can be read as kind (or decides the kind
// when kind is "") and returns an empty column for it.
func newFrameColumn(field arrow.Field, col int, kind, role, file string) (FrameColumn, error) {
	cls := classOf(field.Type)
	fc := FrameColumn{Name: field.Name, Type: typeName(field.Type), cls: cls, col: col}
	bad := func(why string) error {
		return &pipeline.Error{File: file, RowGroup: -1, Row: -1, Column: field.Name,
			Err: fmt.Errorf("%s column has type %s: %s", role, fc.Type, why)}
	}
	if cls == classUnsupported {
		return fc, bad("heft reads integer, floating-point, string, dictionary-of-string and boolean columns")
	}
	switch kind {
	case KindNumeric:
		if cls == classString {
			return fc, bad("a numeric column is needed")
		}
	case KindCategorical:
		if cls == classFloat {
			return fc, bad("a categorical column must be string, boolean or integer-coded")
		}
	default:
		kind = KindNumeric
		if cls == classString || cls == classBool {
			kind = KindCategorical
		}
	}
	fc.Kind = kind
	if kind == KindCategorical {
		fc.index = make(map[string]int32)
	}
	return fc, nil
}
