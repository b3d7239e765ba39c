package fit

import (
	"cmp"
	"errors"
	"fmt"
	"math"
	"slices"
	"strconv"
	"strings"

	"github.com/heft-project/heft/pipeline"
)

// DefaultMinLevel is the minimum count a categorical level needs in the fit
// sample to get its own term; rarer levels are pooled into LevelOther. A
// common-practice value with no published source.
const DefaultMinLevel = 10

// Terms lists the model's term names: "intercept", then per covariate as
// documented on Encoding.
func (e *Encoding) Terms() []string {
	terms := []string{"intercept"}
	for _, c := range e.Columns {
		terms = append(terms, c.terms()...)
	}
	return terms
}

// terms are the column's own term names, in order.
func (c *ColumnSpec) terms() []string {
	var t []string
	if c.Kind == KindNumeric {
		t = append(t, c.Name)
	} else {
		for _, l := range c.Levels {
			t = append(t, c.Name+"="+l)
		}
		if len(c.Pooled) > 0 {
			t = append(t, c.Name+"="+LevelOther)
		}
	}
	if c.MissingIndicator {
		t = append(t, c.Name+"="+LevelMissing)
	}
	return t
}

// nTerms is len(c.terms()) without building the names.
func (c *ColumnSpec) nTerms() int {
	n := 1
	if c.Kind == KindCategorical {
		n = len(c.Levels)
		if len(c.Pooled) > 0 {
			n++
		}
	}
	if c.MissingIndicator {
		n++
	}
	return n
}

// levelCount is one level of a categorical column with its frequency.
type levelCount struct {
	text string
	n    int
}

// countLevels returns the column's levels, most frequent first, ties in
// lexical order, and the count of missing rows.
func countLevels(c *FrameColumn) ([]levelCount, int) {
	counts := make([]int, len(c.Dict))
	missing := 0
	for _, k := range c.Codes {
		if k < 0 {
			missing++
		} else {
			counts[k]++
		}
	}
	var lv []levelCount
	for k, n := range counts {
		if n > 0 {
			lv = append(lv, levelCount{c.Dict[k], n})
		}
	}
	slices.SortFunc(lv, func(a, b levelCount) int {
		if a.n != b.n {
			return cmp.Compare(b.n, a.n)
		}
		return strings.Compare(a.text, b.text)
	})
	return lv, missing
}

// showValues formats up to five values with their counts for error messages.
func showValues(lv []levelCount) string {
	var b strings.Builder
	for i, l := range lv {
		if i == 5 {
			fmt.Fprintf(&b, ", and %d more", len(lv)-5)
			break
		}
		if i > 0 {
			b.WriteString(", ")
		}
		fmt.Fprintf(&b, "%q (%d rows)", l.text, l.n)
	}
	return b.String()
}

// decideArms reads the binary treatment from the frame: 0/1 integers,
// booleans (treated = 1/true unless treatedValue says otherwise), or a
// two-valued string with treatedValue naming the treated one.
func decideArms(fr *Frame, treatedValue string) (Treatment, []int8, error) {
	tc := &fr.Treatment
	tr := Treatment{Column: tc.Name, Type: tc.Type}
	fail := func(format string, a ...any) (Treatment, []int8, error) {
		return tr, nil, fmt.Errorf("treatment column %q: %s", tc.Name, fmt.Sprintf(format, a...))
	}
	lv, _ := countLevels(tc)
	if len(lv) == 0 {
		return fail("no rows with a non-null treatment (%d rows read, %d with a null treatment)", fr.RowsRead, fr.NullTreatment)
	}
	var treated, control string
	switch tc.cls {
	case classInt, classUint, classBool:
		zero, one := "0", "1"
		if tc.cls == classBool {
			zero, one = "false", "true"
		}
		for _, l := range lv {
			if l.text != zero && l.text != one {
				return fail("a binary treatment must be %s/%s; found %s", zero, one, showValues(lv))
			}
		}
		treated, control = one, zero
		if treatedValue != "" && treatedValue != one {
			if treatedValue != zero {
				return fail("treated value %q is not %s or %s", treatedValue, zero, one)
			}
			treated, control = zero, one
		}
	case classString:
		if len(lv) != 2 {
			break
		}
		switch treatedValue {
		case "":
			return fail("a string treatment needs the treated value to be named; found %s", showValues(lv))
		case lv[0].text:
			treated, control = lv[0].text, lv[1].text
		case lv[1].text:
			treated, control = lv[1].text, lv[0].text
		default:
			return fail("treated value %q is not among the values found: %s", treatedValue, showValues(lv))
		}
	default:
		return fail("type %s cannot be a treatment", tc.Type)
	}
	if len(lv) != 2 {
		return fail("two arms are needed; found %s", showValues(lv))
	}
	tr.TreatedValue, tr.ControlValue = treated, control
	tcode := int32(slices.Index(tc.Dict, treated))
	t := make([]int8, fr.n)
	for i, k := range tc.Codes {
		if k == tcode {
			t[i] = 1
		}
	}
	return tr, t, nil
}

// decideOutcome chooses the outcome's kind: kind as given, or with kind ""
// binary when the non-missing values are only 0 and 1.
func decideOutcome(fr *Frame, kind string) (*Outcome, error) {
	oc := fr.Outcome
	if oc == nil {
		return nil, nil
	}
	binary := true
	valid := 0
	for _, v := range oc.Num {
		if math.IsNaN(v) {
			continue
		}
		valid++
		if v != 0 && v != 1 {
			binary = false
		}
	}
	if valid == 0 {
		return nil, fmt.Errorf("outcome column %q has no non-missing values in the fit sample", oc.Name)
	}
	switch kind {
	case "":
		kind = "continuous"
		if binary {
			kind = "binary"
		}
	case "binary":
		if !binary {
			return nil, fmt.Errorf("outcome column %q is declared binary but takes values other than 0 and 1", oc.Name)
		}
	case "continuous":
	default:
		return nil, fmt.Errorf("outcome kind %q: want continuous or binary", kind)
	}
	return &Outcome{Column: oc.Name, Type: oc.Type, Kind: kind}, nil
}

// buildEncoding decides every column's encoding from the frame: levels by
// frequency (reference = most frequent, ties in lexical order; levels rarer
// than minLevel pooled into LevelOther; kept levels by descending frequency,
// then lexically) and the missing policy. It also returns the missing counts
// per column (covariates and outcome) for the diagnostics.
func buildEncoding(fr *Frame, missing string, minLevel int) ([]ColumnSpec, map[string]int, error) {
	switch missing {
	case "":
		missing = MissingError
	case MissingError, MissingIndicator:
	default:
		return nil, nil, fmt.Errorf("missing-value policy %q: want %s or %s", missing, MissingError, MissingIndicator)
	}
	if minLevel <= 0 {
		minLevel = DefaultMinLevel
	}
	counts := map[string]int{}
	if fr.Outcome != nil {
		if n, _ := fr.Outcome.Missing(); n > 0 {
			counts[fr.Outcome.Name] = n
		}
	}
	specs := make([]ColumnSpec, len(fr.Columns))
	for k := range fr.Columns {
		c := &fr.Columns[k]
		s := ColumnSpec{Name: c.Name, Type: c.Type, Kind: c.Kind}
		nMiss, first := c.Missing()
		if nMiss > 0 {
			counts[c.Name] = nMiss
			if missing == MissingError {
				return nil, counts, fr.errAt(first, c.Name, fmt.Errorf(
					"%d of %d rows in the fit sample are missing (null or NaN), the first here; choose the missing-indicator policy or clean the column", nMiss, fr.n))
			}
			if nMiss == fr.n {
				return nil, counts, fr.errAt(first, c.Name, errors.New("every row in the fit sample is missing"))
			}
			s.MissingIndicator = true
		}
		if c.Kind == KindNumeric {
			if s.MissingIndicator {
				var sum float64
				for _, v := range c.Num {
					if !math.IsNaN(v) {
						sum += v
					}
				}
				s.Impute = sum / float64(fr.n-nMiss)
			}
		} else {
			lv, _ := countLevels(c)
			if len(lv) > 1 && lv[0].n < minLevel {
				return nil, counts, allRare(fr, c, lv, minLevel)
			}
			s.Reference = lv[0].text
			for _, l := range lv[1:] {
				if l.n >= minLevel {
					s.Levels = append(s.Levels, l.text)
				} else {
					s.Pooled = append(s.Pooled, l.text)
				}
			}
			slices.Sort(s.Pooled)
			if c.cls == classInt || c.cls == classUint {
				// Integer codes keep their numeric order in the record.
				slices.SortFunc(s.Pooled, func(a, b string) int {
					x, _ := strconv.ParseInt(a, 10, 64)
					y, _ := strconv.ParseInt(b, 10, 64)
					return cmp.Compare(x, y)
				})
			}
		}
		specs[k] = s
	}
	if len(counts) == 0 {
		counts = nil
	}
	return specs, counts, nil
}

// allRare explains a categorical column none of whose levels is common
// enough to keep: every value would be pooled into one term, and the fit
// would fail with a separation that names no cause. The usual cause is a
// numeric column read as text because of one value that is not a number
// (a CSV typo), so such a value is located.
func allRare(fr *Frame, c *FrameColumn, lv []levelCount, minLevel int) error {
	numeric := func(s string) bool {
		_, err := strconv.ParseFloat(strings.TrimSpace(s), 64)
		return err == nil
	}
	words := 0
	for _, l := range lv {
		if !numeric(l.text) {
			words++
		}
	}
	msg := fmt.Sprintf("no level of this categorical column occurs %d times (%d distinct values in %d rows), so every level would be pooled into one",
		minLevel, len(lv), fr.n)
	if words > 0 && words*10 <= len(lv) {
		for i, k := range c.Codes {
			if k >= 0 && !numeric(c.Dict[k]) {
				return fr.errAt(i, c.Name, fmt.Errorf("%s; all but %d of its values are numbers: is %q, here, a stray word in a numeric column?", msg, words, c.Dict[k]))
			}
		}
	}
	first := fr.Origin(0)
	return &pipeline.Error{File: first.File, RowGroup: -1, Row: -1, Column: c.Name,
		Err: fmt.Errorf("%s; lower the minimum level count or leave the column out", msg)}
}
