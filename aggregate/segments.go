package aggregate

import (
	"encoding/binary"
	"errors"
	"fmt"
	"strconv"
	"strings"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/array"
	"github.com/heft-project/heft/fit"
	"github.com/heft-project/heft/score"
)

// NullValue is how a null segment value is written.
const NullValue = "(null)"

// Defaults for Config.
const (
	DefaultMinSegmentRows = 100
	DefaultMaxSegments    = 1000
)

// cell is what is kept for the whole run and for each segment: counts,
// weight sums, balance and effect estimates.
type cell struct {
	Rows          int64    `json:"rows"`
	NullTreatment int64    `json:"null_treatment"`
	N             [2]int64 `json:"n"` // control, treated
	// SumW and SumW2 are Σw and Σw² per arm over rows with a usable weight.
	SumW    [2]Sum   `json:"sum_w"`
	SumW2   [2]Sum   `json:"sum_w2"`
	Balance *balance `json:"balance"`
	Effects *Effects `json:"effects"`
}

// add folds in a batch; rows and w are derived from b and s by the State,
// hist and eff are scratch.
// arm is the rows' treatment codes and bt the batch's 0/1 terms.
func (c *cell) add(b *fit.Batch, s *score.Scores, rows *arms, arm []int8, w []float64, hist []float64, bt *binaryTerms, eff *EffectsScratch) {
	c.Rows += int64(b.N)
	c.NullTreatment += int64(b.N - len(rows[0]) - len(rows[1]))
	var sws [2]float64
	for a, idx := range rows {
		var sw, sw2 float64
		for _, i := range idx {
			sw += w[i]
			sw2 += w[i] * w[i]
		}
		sws[a] = sw
		c.N[a] += int64(len(idx))
		c.SumW[a].Add(sw)
		c.SumW2[a].Add(sw2)
	}
	c.Balance.add(b.X, rows, w, hist, bt, arm, sws)
	c.Effects.addWith(b, s, eff, bt)
}

// check refuses a decoded cell whose parts lack the model's shape.
func (c *cell) check(sh *shared) error {
	if c.Balance == nil || c.Effects == nil {
		return errors.New("state is missing accumulators")
	}
	if err := c.Balance.check(len(sh.terms)); err != nil {
		return err
	}
	if err := c.Effects.Check(); err != nil {
		return err
	}
	if c.Effects.Config != sh.effects {
		return errors.New("state's effects were accumulated for another configuration")
	}
	return nil
}

func (c *cell) merge(o *cell) error {
	c.Rows += o.Rows
	c.NullTreatment += o.NullTreatment
	for a := 0; a < 2; a++ {
		c.N[a] += o.N[a]
		c.SumW[a].Merge(o.SumW[a])
		c.SumW2[a].Merge(o.SumW2[a])
	}
	c.Balance.merge(o.Balance)
	return c.Effects.Merge(o.Effects)
}

// ess is Kish's effective sample size (Σw)²/Σw² per arm (Kish 1965, Survey
// Sampling, Wiley); NaN for an arm without weight.
func (c *cell) ess(a int) float64 {
	s, s2 := c.SumW[a].Value(), c.SumW2[a].Value()
	if !(s2 > 0) {
		return nan()
	}
	return s * s / s2
}

// segment is one value tuple of the By columns.
type segment struct {
	Values []*string `json:"values"` // per By column, null for null
	cell
	key   string
	stamp uint64 // the State's Add call that last saw this segment
	local int    // its number within that call's batch
}

// text is the segment's values as text, NullValue for null.
func (g *segment) text() []string {
	t := make([]string, len(g.Values))
	for i, v := range g.Values {
		if v == nil {
			t[i] = NullValue
		} else {
			t[i] = *v
		}
	}
	return t
}

// segmenter assigns rows to segments by the text of the By columns.
type segmenter struct {
	by  []string
	max int
}

// key appends row i's segment key to buf: per column a byte 0 for null or
// 1 followed by the value's length (uvarint) and text, so keys of
// different tuples never collide.
func appendKey(buf []byte, cols []arrow.Array, i int) []byte {
	for _, c := range cols {
		if c.IsNull(i) {
			buf = append(buf, 0)
			continue
		}
		buf = append(buf, 1)
		start := len(buf)
		buf = append(buf, 0, 0, 0, 0, 0) // room for the length, fixed below
		buf = appendValue(buf, c, i)
		n := len(buf) - start - 5
		var l [binary.MaxVarintLen64]byte
		k := binary.PutUvarint(l[:], uint64(n))
		// move the text left to sit right after its k-byte length
		copy(buf[start:], l[:k])
		copy(buf[start+k:], buf[start+5:])
		buf = buf[:start+k+n]
	}
	return buf
}

// decodeKey splits a key into its values, nil for null.
func decodeKey(key string) []*string {
	var vals []*string
	for len(key) > 0 {
		if key[0] == 0 {
			vals = append(vals, nil)
			key = key[1:]
			continue
		}
		n, k := binary.Uvarint([]byte(key[1:min(len(key), 1+binary.MaxVarintLen64)]))
		key = key[1+k:]
		v := key[:n]
		vals = append(vals, &v)
		key = key[n:]
	}
	return vals
}

// encodeKey is the key of a value tuple, as appendKey builds it.
func encodeKey(vals []*string) string {
	var buf []byte
	for _, v := range vals {
		if v == nil {
			buf = append(buf, 0)
			continue
		}
		buf = append(buf, 1)
		buf = binary.AppendUvarint(buf, uint64(len(*v)))
		buf = append(buf, *v...)
	}
	return string(buf)
}

// appendValue appends the text of a non-null value: numbers in Go's
// shortest form, booleans as true/false, strings as they are.
func appendValue(buf []byte, c arrow.Array, i int) []byte {
	switch a := c.(type) {
	case *array.String:
		return append(buf, a.Value(i)...)
	case *array.LargeString:
		return append(buf, a.Value(i)...)
	case *array.Int64:
		return strconv.AppendInt(buf, a.Value(i), 10)
	case *array.Int32:
		return strconv.AppendInt(buf, int64(a.Value(i)), 10)
	case *array.Int16:
		return strconv.AppendInt(buf, int64(a.Value(i)), 10)
	case *array.Int8:
		return strconv.AppendInt(buf, int64(a.Value(i)), 10)
	case *array.Uint64:
		return strconv.AppendUint(buf, a.Value(i), 10)
	case *array.Uint32:
		return strconv.AppendUint(buf, uint64(a.Value(i)), 10)
	case *array.Uint16:
		return strconv.AppendUint(buf, uint64(a.Value(i)), 10)
	case *array.Uint8:
		return strconv.AppendUint(buf, uint64(a.Value(i)), 10)
	case *array.Float64:
		return strconv.AppendFloat(buf, a.Value(i), 'g', -1, 64)
	case *array.Float32:
		return strconv.AppendFloat(buf, float64(a.Value(i)), 'g', -1, 32)
	case *array.Boolean:
		return strconv.AppendBool(buf, a.Value(i))
	case *array.Dictionary:
		d := a.Dictionary()
		j := a.GetValueIndex(i)
		if d.IsNull(j) {
			return append(buf, NullValue...)
		}
		return appendValue(buf, d, j)
	}
	return append(buf, c.ValueStr(i)...)
}

// byColumns finds the By columns in a batch's schema.
func (g *segmenter) columns(rec arrow.RecordBatch, cols []arrow.Array) ([]arrow.Array, error) {
	cols = cols[:0]
	if rec == nil {
		return nil, fmt.Errorf("--by %s: no record batch to read the segment columns from", quoteList(g.by))
	}
	sch := rec.Schema()
	for _, name := range g.by {
		idx := sch.FieldIndices(name)
		if len(idx) == 0 {
			return nil, fmt.Errorf("--by column %q is not in the input (columns: %s)", name, strings.Join(fieldNames(sch), ", "))
		}
		cols = append(cols, rec.Column(idx[0]))
	}
	return cols, nil
}

func fieldNames(s *arrow.Schema) []string {
	names := make([]string, s.NumFields())
	for i, f := range s.Fields() {
		names[i] = f.Name
	}
	return names
}

func quoteList(s []string) string {
	q := make([]string, len(s))
	for i, v := range s {
		q[i] = strconv.Quote(v)
	}
	return strings.Join(q, ", ")
}

func (g *segmenter) tooMany() error {
	return fmt.Errorf("--by %s: more than %d distinct segments; choose coarser columns or raise the maximum number of segments", quoteList(g.by), g.max)
}

// gather copies the rows idx of b and s (and of arm and w) into dst,
// reusing its buffers, so a segment's rows can be fed to the same code as
// a whole batch.
func gather(idx []int32, b *fit.Batch, s *score.Scores, arm []int8, w []float64, dst *gathered) {
	n := len(idx)
	dst.b.N, dst.s.N = n, n
	if len(dst.b.X) != len(b.X) {
		dst.b.X = make([][]float64, len(b.X))
	}
	for j, col := range b.X {
		x := grow(dst.b.X[j], n)
		for k, i := range idx {
			x[k] = col[i]
		}
		dst.b.X[j] = x
	}
	dst.b.T = growT(dst.b.T, n)
	dst.arm = growT(dst.arm, n)
	dst.w = grow(dst.w, n)
	dst.s.E = grow(dst.s.E, n)
	dst.s.W = grow(dst.s.W, n)
	dst.s.WValid = growB(dst.s.WValid, n)
	dst.s.InSupport = growB(dst.s.InSupport, n)
	for k, i := range idx {
		dst.b.T[k] = b.T[i]
		dst.arm[k] = arm[i]
		dst.w[k] = w[i]
		dst.s.E[k] = s.E[i]
		dst.s.W[k] = s.W[i]
		dst.s.WValid[k] = s.WValid[i]
		dst.s.InSupport[k] = s.InSupport[i]
	}
	dst.b.Y, dst.b.YValid = nil, nil
	if b.Y != nil {
		dst.y = grow(dst.y, n)
		dst.yv = growB(dst.yv, n)
		for k, i := range idx {
			dst.y[k] = b.Y[i]
			dst.yv[k] = b.YValid[i]
		}
		dst.b.Y, dst.b.YValid = dst.y, dst.yv
	}
	dst.s.Mu0, dst.s.Mu1 = nil, nil
	if s.Mu0 != nil && s.Mu1 != nil {
		dst.mu0 = grow(dst.mu0, n)
		dst.mu1 = grow(dst.mu1, n)
		for k, i := range idx {
			dst.mu0[k] = s.Mu0[i]
			dst.mu1[k] = s.Mu1[i]
		}
		dst.s.Mu0, dst.s.Mu1 = dst.mu0, dst.mu1
	}
}

// gathered is the scratch one segment's rows are copied into.
type gathered struct {
	b        fit.Batch
	s        score.Scores
	arm      []int8
	rows     arms
	w        []float64
	y        []float64
	yv       []bool
	mu0, mu1 []float64
}

func grow(x []float64, n int) []float64 {
	if cap(x) < n {
		return make([]float64, n)
	}
	return x[:n]
}

func growT(x []int8, n int) []int8 {
	if cap(x) < n {
		return make([]int8, n)
	}
	return x[:n]
}

func growB(x []bool, n int) []bool {
	if cap(x) < n {
		return make([]bool, n)
	}
	return x[:n]
}
