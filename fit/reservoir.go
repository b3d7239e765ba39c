package fit

import (
	"context"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"strings"

	"github.com/apache/arrow-go/v18/arrow"

	"github.com/heft-project/heft/pipeline"
)

// SampleOptions say which columns the fit needs and how many rows to keep.
type SampleOptions struct {
	Treatment   string
	Covariates  []string
	Categorical []string // also listed in Covariates; marks integer columns categorical (string/dictionary/bool columns are categorical automatically)
	Outcome     string   // optional
	SampleRows  int      // 0 = keep every row
	Seed        uint64
	// ExpectedRows, when known (from Parquet footers), is the number of
	// input rows; the frame's columns are allocated once at the size the
	// sample will have instead of growing by appends. 0 = unknown. A wrong
	// value costs memory or regrowth, never a wrong result.
	ExpectedRows int64
}

// ReadSample reads src to the end and returns the fit sample: every row
// whose treatment is not null or, with SampleRows = N > 0, a uniform sample
// of N of them by reservoir sampling (Vitter 1985, "Random sampling with a
// reservoir", ACM TOMS 11(1), Algorithm R): keep the first N rows; row i
// (0-based, i ≥ N) then replaces slot j, drawn uniformly from 0..i, when
// j < N. After i+1 rows every row is in the reservoir with probability
// N/(i+1). One pass; memory bounded by N. The random source is math/rand/v2's
// PCG seeded with (Seed, 0), so a seed always gives the same sample of the
// same input.
//
// Every row, kept or not, is checked for ±Inf in the numeric covariates and
// the outcome, which are errors at score time too.
func ReadSample(ctx context.Context, src pipeline.Source, opt SampleOptions) (*Frame, error) {
	if opt.Treatment == "" {
		return nil, errors.New("no treatment column given")
	}
	if opt.SampleRows < 0 || opt.SampleRows > math.MaxInt32 {
		return nil, fmt.Errorf("sample size %d is outside 0…%d", opt.SampleRows, math.MaxInt32)
	}
	if err := checkNames(opt); err != nil {
		return nil, err
	}
	r := &reader{opt: opt, fr: &Frame{Sampled: opt.SampleRows > 0, Seed: opt.Seed}, originOf: map[origin]int32{}}
	if r.fr.Sampled {
		r.rng = rand.New(rand.NewPCG(opt.Seed, 0))
	}
	schema := src.Schema()
	file := src.Location().File
	for _, f := range schema.Fields() {
		r.fr.Schema = append(r.fr.Schema, Field{Name: f.Name, Type: typeName(f.Type), Nullable: f.Nullable})
	}
	if err := r.setup(schema, file); err != nil {
		return nil, err
	}
	for src.Next(ctx) {
		if err := r.batch(src.RecordBatch(), src.Location()); err != nil {
			return nil, err
		}
	}
	if err := src.Err(); err != nil {
		return nil, err
	}
	if err := ctx.Err(); err != nil {
		return nil, err
	}
	fr := r.fr
	if r.fr.Sampled {
		fr.Treatment.compact()
		for i := range fr.Columns {
			if fr.Columns[i].Kind == KindCategorical {
				fr.Columns[i].compact()
			}
		}
	}
	fr.Treatment.index = nil
	for i := range fr.Columns {
		fr.Columns[i].index = nil
	}
	return fr, nil
}

func checkNames(opt SampleOptions) error {
	seen := map[string]string{opt.Treatment: "the treatment"}
	if opt.Outcome != "" {
		if r, ok := seen[opt.Outcome]; ok {
			return fmt.Errorf("column %q is both the outcome and %s", opt.Outcome, r)
		}
		seen[opt.Outcome] = "the outcome"
	}
	for _, c := range opt.Covariates {
		if r, ok := seen[c]; ok {
			return fmt.Errorf("column %q is both a covariate and %s", c, r)
		}
		seen[c] = "a covariate"
	}
	for _, c := range opt.Categorical {
		if seen[c] != "a covariate" {
			return fmt.Errorf("categorical column %q is not among the covariates", c)
		}
	}
	return nil
}

type reader struct {
	opt      SampleOptions
	fr       *Frame
	rng      *rand.Rand
	seen     int64 // usable (non-null-treatment) rows so far
	schema   *arrow.Schema
	slots    []int32
	num      []float64
	lastO    origin
	lastOi   int32
	originOf map[origin]int32
}

// setup resolves the columns in schema, checking presence and types.
func (r *reader) setup(schema *arrow.Schema, file string) error {
	find := func(name, role string) (arrow.Field, int, error) {
		idx := schema.FieldIndices(name)
		if len(idx) == 0 {
			names := make([]string, 0, schema.NumFields())
			for _, f := range schema.Fields() {
				names = append(names, f.Name)
			}
			return arrow.Field{}, -1, &pipeline.Error{File: file, RowGroup: -1, Row: -1, Column: name,
				Err: fmt.Errorf("%s column not found; the input has: %s", role, strings.Join(names, ", "))}
		}
		if len(idx) > 1 {
			return arrow.Field{}, -1, &pipeline.Error{File: file, RowGroup: -1, Row: -1, Column: name,
				Err: fmt.Errorf("%s column appears %d times in the input", role, len(idx))}
		}
		return schema.Field(idx[0]), idx[0], nil
	}
	first := r.schema == nil
	r.schema = schema
	resolve := func(fc *FrameColumn, name, role, kind string) error {
		f, i, err := find(name, role)
		if err != nil {
			return err
		}
		if first {
			*fc, err = newFrameColumn(f, i, kind, role, file)
			return err
		}
		// A numeric column may change width or become floating-point
		// between files (CSV type inference does that); a categorical one
		// or the treatment must keep its class.
		c := classOf(f.Type)
		ok := sameClass(c, fc.cls)
		if fc.Kind == KindNumeric {
			ok = c.numeric() || (c == classBool && role == "outcome")
		}
		if !ok {
			return &pipeline.Error{File: file, RowGroup: -1, Row: -1, Column: name,
				Err: fmt.Errorf("%s column has type %s here but %s in the earlier input", role, typeName(f.Type), fc.Type)}
		}
		fc.col = i
		if fc.Kind == KindNumeric {
			fc.cls = c // the Inf check depends on it
		}
		return nil
	}
	if first {
		r.fr.Columns = make([]FrameColumn, len(r.opt.Covariates))
		defer r.presize()
	}
	if err := resolve(&r.fr.Treatment, r.opt.Treatment, "treatment", KindCategorical); err != nil {
		var pe *pipeline.Error
		if first && errors.As(err, &pe) && r.fr.Treatment.cls == classFloat {
			pe.Err = fmt.Errorf("treatment column has type %s: heft needs 0/1 integers, booleans or a two-valued string", r.fr.Treatment.Type)
		}
		return err
	}
	if r.opt.Outcome != "" {
		if first {
			r.fr.Outcome = new(FrameColumn)
		}
		if err := resolve(r.fr.Outcome, r.opt.Outcome, "outcome", KindNumeric); err != nil {
			return err
		}
	}
	for k, name := range r.opt.Covariates {
		kind := ""
		if slices.Contains(r.opt.Categorical, name) {
			kind = KindCategorical
		}
		if err := resolve(&r.fr.Columns[k], name, "covariate", kind); err != nil {
			return err
		}
	}
	return nil
}

// presize gives the frame's columns the capacity of the expected sample:
// every expected row, or SampleRows when sampling fewer.
func (r *reader) presize() {
	n := r.opt.ExpectedRows
	if r.opt.SampleRows > 0 {
		n = min(n, int64(r.opt.SampleRows))
	}
	if n <= 0 || n > math.MaxInt32 {
		return
	}
	size := func(c *FrameColumn) {
		if c.Kind == KindNumeric {
			c.Num = make([]float64, 0, n)
		} else {
			c.Codes = make([]int32, 0, n)
		}
	}
	size(&r.fr.Treatment)
	if r.fr.Outcome != nil {
		size(r.fr.Outcome)
	}
	for k := range r.fr.Columns {
		size(&r.fr.Columns[k])
	}
	r.fr.originIdx = make([]int32, 0, n)
	r.fr.originRow = make([]int64, 0, n)
}

func (r *reader) batch(rec arrow.RecordBatch, loc pipeline.Location) error {
	if s := rec.Schema(); s != r.schema && !s.Equal(r.schema) {
		if err := r.setup(s, loc.File); err != nil {
			return err
		}
	}
	n := int(rec.NumRows())
	r.fr.RowsRead += int64(n)
	if n == 0 {
		return nil
	}
	// Decide each row's slot before touching the columns.
	r.slots = slices.Grow(r.slots[:0], n)[:n]
	tarr := rec.Column(r.fr.Treatment.col)
	N := int64(r.opt.SampleRows)
	kept := false
	base := r.fr.n
	appendAll := true // every row lands at the frame's end, in order
	for i := range n {
		if tarr.IsNull(i) {
			r.slots[i] = -1
			r.fr.NullTreatment++
			appendAll = false
			continue
		}
		k := r.seen
		r.seen++
		switch {
		case N == 0 || k < N:
			r.slots[i] = int32(k)
		default:
			if j := r.rng.Int64N(k + 1); j < N {
				r.slots[i] = int32(j)
			} else {
				r.slots[i] = -1
				appendAll = false
				continue
			}
		}
		if int(r.slots[i]) != base+i {
			appendAll = false
		}
		kept = true
	}
	if N == 0 && r.seen > math.MaxInt32 {
		return pipeline.At(loc.File, fmt.Errorf("more than %d rows: give a sample size", math.MaxInt32))
	}
	r.num = slices.Grow(r.num[:0], n)[:n]
	check := func(fc *FrameColumn, role string) error {
		arr := rec.Column(fc.col)
		if fc.Kind != KindNumeric {
			if kept {
				fc.take(arr, r.slots, nil)
			}
			return nil
		}
		num := r.num
		if appendAll {
			// Convert straight into the column's end instead of through
			// the scratch buffer and take.
			at := len(fc.Num)
			fc.Num = slices.Grow(fc.Num, n)[:at+n]
			num = fc.Num[at:]
		}
		floatsOf(arr, num)
		if fc.cls == classFloat {
			for i, v := range num {
				if math.IsInf(v, 0) {
					return &pipeline.Error{File: loc.File, RowGroup: loc.RowGroup, Row: loc.Row + int64(i), Column: fc.Name,
						Err: fmt.Errorf("%s value is %v; infinite values cannot be used", role, v)}
				}
			}
		}
		if kept && !appendAll {
			fc.take(arr, r.slots, r.num)
		}
		return nil
	}
	if err := check(&r.fr.Treatment, "treatment"); err != nil {
		return err
	}
	if r.fr.Outcome != nil {
		if err := check(r.fr.Outcome, "outcome"); err != nil {
			return err
		}
	}
	for k := range r.fr.Columns {
		if err := check(&r.fr.Columns[k], "covariate"); err != nil {
			return err
		}
	}
	if !kept {
		return nil
	}
	// Origins, for error messages at fit.
	o := origin{file: loc.File, rowGroup: loc.RowGroup}
	if len(r.fr.origins) == 0 || o != r.lastO {
		oi, ok := r.originOf[o]
		if !ok {
			oi = int32(len(r.fr.origins))
			r.fr.origins = append(r.fr.origins, o)
			r.originOf[o] = oi
		}
		r.lastO, r.lastOi = o, oi
	}
	for i, s := range r.slots {
		if s < 0 {
			continue
		}
		if int(s) == len(r.fr.originIdx) {
			r.fr.originIdx = append(r.fr.originIdx, r.lastOi)
			r.fr.originRow = append(r.fr.originRow, loc.Row+int64(i))
		} else {
			r.fr.originIdx[s] = r.lastOi
			r.fr.originRow[s] = loc.Row + int64(i)
		}
	}
	r.fr.n = len(r.fr.originIdx)
	// Replaced rows leave unused levels behind; keep the dictionaries bounded by N.
	if N > 0 {
		limit := 2*int(N) + 1024
		if len(r.fr.Treatment.Dict) > limit {
			r.fr.Treatment.compact()
		}
		for k := range r.fr.Columns {
			if c := &r.fr.Columns[k]; c.Kind == KindCategorical && len(c.Dict) > limit {
				c.compact()
			}
		}
	}
	return nil
}
