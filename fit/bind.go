package fit

import (
	"errors"
	"fmt"
	"math"
	"strconv"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/array"

	"github.com/heft-project/heft/pipeline"
)

// Level positions of a categorical value, relative to the column's first
// term. Non-negative values are term offsets.
const (
	posReference int32 = -1
	posUnseen    int32 = -2
	posMissing   int32 = -3
)

// Encoder encodes record batches of one schema into model terms. It keeps
// scratch buffers, so like a Batch it belongs to one goroutine; Clone gives
// another goroutine its own.
type Encoder struct {
	enc     *Encoding
	schema  *arrow.Schema // the last batch schema checked
	unseen  string
	nTerms  int // terms without the intercept
	treat   binding
	outcome *binding
	cols    []binding

	pos []int32 // per-row level positions, scratch
}

// binding ties one model column to a schema position.
type binding struct {
	name string
	spec *ColumnSpec // nil for the treatment and the outcome
	idx  int
	cls  class
	base int // first term (index into Batch.X)
	miss int // the missing-indicator term, or -1
	// Categorical: level text → position. Integer-coded columns also get
	// ints (dense over [lo, lo+len) when the codes are close together).
	pos   map[string]int32
	table *levelTable // pos again, for plain string arrays
	ints  map[int64]int32
	dense []int32
	lo    int64
	bools [2]int32 // false, true
	// Last dictionary seen and its entries' positions.
	lastDict arrow.ArrayData
	dictPos  []int32
}

// Bind checks schema against the encoding and returns an Encoder for
// batches of that schema. Every covariate and the treatment must be present
// with the class of type they had at fit (numeric stays numeric at any
// width; a categorical stays string, boolean or integer-coded); a class
// change is an error naming file, column and both types. With outcome true
// the outcome column is required and decoded too. unseen is UnseenError
// (default) or UnseenReference.
func (e *Encoding) Bind(schema *arrow.Schema, file string, outcome bool, unseen string) (*Encoder, error) {
	switch unseen {
	case "":
		unseen = UnseenError
	case UnseenError, UnseenReference:
	default:
		return nil, fmt.Errorf("unseen-level policy %q: want %s or %s", unseen, UnseenError, UnseenReference)
	}
	enc := &Encoder{enc: e, unseen: unseen, schema: schema}
	var err error
	if enc.treat, err = e.bindTreatment(schema, file); err != nil {
		return nil, err
	}
	if outcome {
		if e.Outcome == nil {
			return nil, pipeline.At(file, errors.New("the model was fitted without an outcome column"))
		}
		b, err := bindColumn(schema, file, e.Outcome.Column, "outcome", e.Outcome.Type, true)
		if err != nil {
			return nil, err
		}
		enc.outcome = &b
	}
	pos := 0
	enc.cols = make([]binding, len(e.Columns))
	for k := range e.Columns {
		s := &e.Columns[k]
		b, err := bindColumn(schema, file, s.Name, "covariate", s.Type, s.Kind == KindNumeric)
		if err != nil {
			return nil, err
		}
		b.spec, b.base, b.miss = s, pos, -1
		n := s.nTerms()
		if s.MissingIndicator {
			b.miss = pos + n - 1
		}
		pos += n
		if s.Kind == KindCategorical {
			b.setLevels(s)
		}
		enc.cols[k] = b
	}
	enc.nTerms = pos
	return enc, nil
}

// CheckSchema checks schema against the model before anything is written:
// the covariates and the treatment as Bind does, and the outcome's type when
// the input has it.
func (m *Model) CheckSchema(schema *arrow.Schema, file string) error {
	outcome := false
	if m.Encoding.Outcome != nil {
		outcome = len(schema.FieldIndices(m.Encoding.Outcome.Column)) > 0
	}
	_, err := m.Encoding.Bind(schema, file, outcome, UnseenError)
	return err
}

// Clone returns an Encoder with its own scratch buffers, for another goroutine.
func (enc *Encoder) Clone() *Encoder {
	c := *enc
	c.pos = nil
	c.cols = make([]binding, len(enc.cols))
	for k, b := range enc.cols {
		b.lastDict, b.dictPos = nil, nil
		c.cols[k] = b
	}
	c.treat.lastDict, c.treat.dictPos = nil, nil
	return &c
}

// NumTerms is the number of encoded terms, the intercept excluded.
func (enc *Encoder) NumTerms() int { return enc.nTerms }

func sameClass(a, b class) bool {
	norm := func(c class) class {
		if c == classUint {
			return classInt
		}
		return c
	}
	return norm(a) == norm(b)
}

// bindColumn finds name in schema and checks its type against fitType.
// numeric: any numeric width is fine (and booleans for the outcome).
func bindColumn(schema *arrow.Schema, file, name, role, fitType string, numeric bool) (binding, error) {
	b := binding{name: name, miss: -1}
	fail := func(err error) (binding, error) {
		return b, &pipeline.Error{File: file, RowGroup: -1, Row: -1, Column: name, Err: err}
	}
	idx := schema.FieldIndices(name)
	switch len(idx) {
	case 0:
		return fail(fmt.Errorf("%s column not found in the input; the model needs it", role))
	case 1:
	default:
		return fail(fmt.Errorf("%s column appears %d times in the input", role, len(idx)))
	}
	dt := schema.Field(idx[0]).Type
	b.idx, b.cls = idx[0], classOf(dt)
	fitCls := classOfName(fitType)
	ok := b.cls != classUnsupported
	if numeric {
		ok = ok && (b.cls.numeric() || (role == "outcome" && b.cls == classBool)) &&
			(fitCls.numeric() || fitCls == classBool)
	} else {
		ok = ok && sameClass(b.cls, fitCls)
	}
	if !ok {
		return fail(fmt.Errorf("%s column has type %s (%s) but was %s (%s) at fit",
			role, typeName(dt), b.cls, fitType, fitCls))
	}
	return b, nil
}

func (e *Encoding) bindTreatment(schema *arrow.Schema, file string) (binding, error) {
	tr := e.Treatment
	b, err := bindColumn(schema, file, tr.Column, "treatment", tr.Type, false)
	if err != nil {
		return b, err
	}
	// Positions: 1 treated, 0 control.
	b.pos = map[string]int32{tr.ControlValue: 0, tr.TreatedValue: 1}
	b.bools = [2]int32{b.lookup("false"), b.lookup("true")}
	b.setInts()
	return b, nil
}

// setLevels fills the level lookup of a categorical covariate.
func (b *binding) setLevels(s *ColumnSpec) {
	b.pos = make(map[string]int32, 1+len(s.Levels)+len(s.Pooled))
	b.pos[s.Reference] = posReference
	for k, l := range s.Levels {
		b.pos[l] = int32(k)
	}
	for _, l := range s.Pooled {
		b.pos[l] = int32(len(s.Levels))
	}
	b.bools = [2]int32{b.lookup("false"), b.lookup("true")}
	b.setInts()
}

func (b *binding) lookup(s string) int32 {
	if p, ok := b.pos[s]; ok {
		return p
	}
	return posUnseen
}

// setInts indexes integer-coded levels by value (and string levels for
// plain string arrays).
func (b *binding) setInts() {
	b.table = newLevelTable(b.pos)
	if b.cls != classInt && b.cls != classUint {
		return
	}
	b.ints = make(map[int64]int32, len(b.pos))
	lo, hi := int64(math.MaxInt64), int64(math.MinInt64)
	for s, p := range b.pos {
		v, err := strconv.ParseInt(s, 10, 64)
		if err != nil {
			continue
		}
		b.ints[v] = p
		lo, hi = min(lo, v), max(hi, v)
	}
	if len(b.ints) > 0 && hi-lo < 1<<16 {
		b.lo = lo
		b.dense = make([]int32, hi-lo+1)
		for i := range b.dense {
			b.dense[i] = posUnseen
		}
		for v, p := range b.ints {
			b.dense[v-lo] = p
		}
	}
}

// positions writes the level position of every row of arr into out:
// posMissing for null (and NaN), posUnseen for a value not in the lookup.
func (b *binding) positions(arr arrow.Array, out []int32) {
	n := arr.Len()
	out = out[:n]
	switch a := arr.(type) {
	case *array.Dictionary:
		dict := a.Dictionary()
		if d := dict.Data(); d != b.lastDict {
			b.dictPos = growInt32(b.dictPos, dict.Len())
			str, _ := stringValue(dict)
			for k := range b.dictPos {
				if dict.IsNull(k) {
					b.dictPos[k] = posMissing
				} else {
					b.dictPos[k] = b.lookup(str(k))
				}
			}
			b.lastDict = d
		}
		idx := dictIndices(a)
		for i := range n {
			out[i] = b.dictPos[idx(i)]
		}
	case *array.Boolean:
		for i := range n {
			if a.Value(i) {
				out[i] = b.bools[1]
			} else {
				out[i] = b.bools[0]
			}
		}
	default:
		if b.table != nil && b.table.stringPositions(arr, out) {
			break
		}
		if str, ok := stringValue(arr); ok {
			var last string
			lastPos := posUnseen
			for i := range n {
				s := str(i)
				if i > 0 && s == last {
					out[i] = lastPos
					continue
				}
				p := b.lookup(s)
				out[i], last, lastPos = p, s, p
			}
			break
		}
		get, _ := intsOf(arr)
		for i := range n {
			v, ok := get(i)
			p := posUnseen
			switch {
			case !ok:
			case b.dense != nil:
				if d := v - b.lo; d >= 0 && d < int64(len(b.dense)) {
					p = b.dense[d]
				}
			default:
				if q, found := b.ints[v]; found {
					p = q
				}
			}
			out[i] = p
		}
	}
	if arr.NullN() > 0 {
		for i := range n {
			if arr.IsNull(i) {
				out[i] = posMissing
			}
		}
	}
}

func growInt32(s []int32, n int) []int32 {
	if cap(s) < n {
		return make([]int32, n)
	}
	return s[:n]
}

func growFloat(s []float64, n int) []float64 {
	if cap(s) < n {
		return make([]float64, n)
	}
	return s[:n]
}

// Encode fills b from rec (b's buffers are reused; b.X gets NumTerms()
// columns of rec.NumRows()). loc locates the batch so that errors are
// *pipeline.Error values naming file, row group, row (loc.Row + i) and
// column. b.Unseen and b.MissingImputed count this batch only.
//
// A null or NaN covariate is an error under MissingError (naming the count
// in the batch and the first row); under MissingIndicator a numeric value is
// imputed, a categorical one encoded as the reference, and the indicator
// term set. ±Inf is always an error. A null treatment gives T = -1; any value
// other than the two arms is an error. An unseen level is an error, or with
// UnseenReference is encoded as the reference and counted.
func (enc *Encoder) Encode(rec arrow.RecordBatch, loc pipeline.Location, b *Batch) error {
	n := int(rec.NumRows())
	b.N = n
	if cap(b.X) < enc.nTerms {
		b.X = append(b.X[:cap(b.X)], make([][]float64, enc.nTerms-cap(b.X))...)
	}
	b.X = b.X[:enc.nTerms]
	for j := range b.X {
		b.X[j] = growFloat(b.X[j], n)
	}
	if b.Unseen == nil {
		b.Unseen = map[string]int64{}
	}
	if b.MissingImputed == nil {
		b.MissingImputed = map[string]int64{}
	}
	clear(b.Unseen)
	clear(b.MissingImputed)
	enc.pos = growInt32(enc.pos, n)
	locErr := func(i int, column string, err error) error {
		return &pipeline.Error{File: loc.File, RowGroup: loc.RowGroup, Row: loc.Row + int64(i), Column: column, Err: err}
	}
	if s := rec.Schema(); s != enc.schema {
		if err := enc.sameLayout(s, loc.File); err != nil {
			return err
		}
		enc.schema = s
	}

	// Treatment.
	b.T = growInt8(b.T, n)
	tarr := rec.Column(enc.treat.idx)
	enc.treat.positions(tarr, enc.pos)
	for i, p := range enc.pos[:n] {
		switch p {
		case 0, 1:
			b.T[i] = int8(p)
		case posMissing:
			b.T[i] = -1
		default:
			tr := enc.enc.Treatment
			return locErr(i, tr.Column, fmt.Errorf("treatment value %q is neither the treated value %q nor the control value %q of the fit",
				textAt(tarr, i), tr.TreatedValue, tr.ControlValue))
		}
	}

	// Outcome.
	if enc.outcome != nil {
		b.Y = growFloat(b.Y, n)
		b.YValid = growBool(b.YValid, n)
		name := enc.enc.Outcome.Column
		floatsOf(rec.Column(enc.outcome.idx), b.Y)
		binary := enc.enc.Outcome.Kind == "binary"
		for i, v := range b.Y[:n] {
			switch {
			case math.IsNaN(v):
				b.YValid[i] = false
			case math.IsInf(v, 0):
				return locErr(i, name, fmt.Errorf("outcome value is %v; infinite values cannot be used", v))
			case binary && v != 0 && v != 1:
				return locErr(i, name, fmt.Errorf("outcome value %v in a binary outcome (fitted on 0/1 values)", v))
			default:
				b.YValid[i] = true
			}
		}
	} else {
		b.Y, b.YValid = nil, nil
	}

	// Covariates.
	for k := range enc.cols {
		c := &enc.cols[k]
		arr := rec.Column(c.idx)
		var err error
		if c.spec.Kind == KindNumeric {
			err = enc.encodeNumeric(c, arr, b, locErr)
		} else {
			err = enc.encodeCategorical(c, arr, b, locErr)
		}
		if err != nil {
			return err
		}
	}
	return nil
}

// sameLayout checks that a batch's schema still has every bound column at
// its position with the same class of type (nullability and metadata may
// differ between a source's schema and its batches).
func (enc *Encoder) sameLayout(s *arrow.Schema, file string) error {
	check := func(b *binding) error {
		if b.idx < s.NumFields() {
			if f := s.Field(b.idx); f.Name == b.name && sameClass(classOf(f.Type), b.cls) {
				return nil
			}
		}
		return &pipeline.Error{File: file, RowGroup: -1, Row: -1, Column: b.name,
			Err: errors.New("batch schema differs from the schema the encoder was bound to")}
	}
	if err := check(&enc.treat); err != nil {
		return err
	}
	if enc.outcome != nil {
		if err := check(enc.outcome); err != nil {
			return err
		}
	}
	for k := range enc.cols {
		if err := check(&enc.cols[k]); err != nil {
			return err
		}
	}
	return nil
}

func growInt8(s []int8, n int) []int8 {
	if cap(s) < n {
		return make([]int8, n)
	}
	return s[:n]
}

func growBool(s []bool, n int) []bool {
	if cap(s) < n {
		return make([]bool, n)
	}
	return s[:n]
}

type locErrFunc func(i int, column string, err error) error

func (enc *Encoder) missingErr(locErr locErrFunc, name string, count, first int) error {
	why := "the model was fitted with missing=" + MissingError
	if enc.enc.Missing == MissingIndicator {
		why = "the column had no missing values in the fit sample, so the model has no missing-indicator term for it"
	}
	return locErr(first, name, fmt.Errorf("%d rows in this batch are missing (null or NaN), the first here; %s", count, why))
}

func (enc *Encoder) encodeNumeric(c *binding, arr arrow.Array, b *Batch, locErr locErrFunc) error {
	x := b.X[c.base]
	floatsOf(arr, x)
	if arr.NullN() == 0 && c.cls != classFloat {
		if c.miss >= 0 {
			clear(b.X[c.miss])
		}
		return nil
	}
	count, first := 0, -1
	for i, v := range x {
		if v-v == 0 { // finite
			continue
		}
		if math.IsInf(v, 0) {
			return locErr(i, c.name, fmt.Errorf("covariate value is %v; infinite values cannot be used", v))
		}
		if first < 0 {
			first = i
		}
		count++
	}
	if c.miss >= 0 {
		clear(b.X[c.miss])
	}
	if count == 0 {
		return nil
	}
	if c.miss < 0 {
		return enc.missingErr(locErr, c.name, count, first)
	}
	ind := b.X[c.miss]
	for i := first; i < len(x); i++ {
		if math.IsNaN(x[i]) {
			x[i] = c.spec.Impute
			ind[i] = 1
		}
	}
	b.MissingImputed[c.name] += int64(count)
	return nil
}

func (enc *Encoder) encodeCategorical(c *binding, arr arrow.Array, b *Batch, locErr locErrFunc) error {
	n := arr.Len()
	pos := enc.pos[:n]
	c.positions(arr, pos)
	nLevels := c.spec.nTerms()
	if c.miss >= 0 {
		nLevels--
	}
	for j := c.base; j < c.base+nLevels; j++ {
		clear(b.X[j])
	}
	if c.miss >= 0 {
		clear(b.X[c.miss])
	}
	var nMiss, nUnseen int
	firstMiss := -1
	for i, p := range pos {
		switch {
		case p >= 0:
			b.X[c.base+int(p)][i] = 1
		case p == posReference:
		case p == posMissing:
			if c.miss < 0 {
				if firstMiss < 0 {
					firstMiss = i
				}
				nMiss++
				continue
			}
			b.X[c.miss][i] = 1
			nMiss++
		default: // posUnseen
			if enc.unseen != UnseenReference {
				return locErr(i, c.name, fmt.Errorf("level %q was not seen at fit (reference %q); use the reference policy for unseen levels to score it as the reference",
					textAt(arr, i), c.spec.Reference))
			}
			nUnseen++
		}
	}
	if nMiss > 0 {
		if c.miss < 0 {
			return enc.missingErr(locErr, c.name, nMiss, firstMiss)
		}
		b.MissingImputed[c.name] += int64(nMiss)
	}
	if nUnseen > 0 {
		b.Unseen[c.name] += int64(nUnseen)
	}
	return nil
}
