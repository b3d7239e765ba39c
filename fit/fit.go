package fit

import (
	"context"
	"errors"
	"fmt"
	"math"
	"runtime"
	"slices"
	"sort"
	"sync"
	"sync/atomic"
	"time"
)

// Options control Fit.
type Options struct {
	SampleOptions        // as given to ReadSample, for the record
	Missing       string // MissingError (default) or MissingIndicator
	MinLevel      int    // levels rarer than this are pooled; 0 means DefaultMinLevel
	// TreatedValue names the treated value of a two-valued string treatment
	// (required then); 0/1 integers and booleans default to 1/true.
	TreatedValue string
	OutcomeKind  string     // "" = auto (binary when the outcome takes only 0 and 1), "continuous", "binary"
	GLM          GLMOptions // for the propensity model and the outcome models
	HeftVersion  string
	Inputs       []string
	Now          time.Time // the fit date, Model.Created
}

// PropensityQs are the q of Diagnostics.PropensityQuantiles.
var propensityQs = [...]float64{0, 0.01, 0.05, 0.25, 0.5, 0.75, 0.95, 0.99, 1}

// Fit builds the encoding from the frame, fits the propensity model and,
// with an outcome, one outcome model per arm (gaussian or binomial), and
// fills the diagnostics and the reference summaries. It returns the model
// and the fit sample's propensities and treatment (1/0), from which the
// caller computes Reference.WeightQuantiles.
//
// Memory: numeric columns without missing values are used as design
// columns as they are; only categorical indicators and imputed columns are
// new, and the arms' outcome designs are copied in turn into one buffer
// the size of the larger arm.
func Fit(ctx context.Context, fr *Frame, opt Options) (m *Model, e []float64, t []int8, err error) {
	if fr == nil {
		return nil, nil, nil, errors.New("no fit sample")
	}
	tr, t, err := decideArms(fr, opt.TreatedValue)
	if err != nil {
		return nil, nil, nil, err
	}
	outcome, err := decideOutcome(fr, opt.OutcomeKind)
	if err != nil {
		return nil, nil, nil, err
	}
	specs, missing, err := buildEncoding(fr, opt.Missing, opt.MinLevel)
	if err != nil {
		return nil, nil, nil, err
	}
	enc := Encoding{Treatment: tr, Outcome: outcome, Columns: specs, Missing: opt.Missing, MinLevel: opt.MinLevel}
	if enc.Missing == "" {
		enc.Missing = MissingError
	}
	if enc.MinLevel <= 0 {
		enc.MinLevel = DefaultMinLevel
	}
	terms := enc.Terms()
	X := design(fr, &enc)

	n := fr.N()
	y := make([]float64, n)
	n1 := 0
	for i, v := range t {
		y[i] = float64(v)
		n1 += int(v)
	}
	g, err := FitLogistic(ctx, X, y, terms, opt.GLM)
	if err != nil {
		return nil, nil, nil, fmt.Errorf("propensity model: %w", err)
	}
	e = y // reuse: y is no longer needed
	LinearPredictor(g, X, e)
	for i, eta := range e {
		e[i] = invLogit(eta)
	}

	m = &Model{
		Format:        FormatName,
		FormatVersion: FormatVersion,
		HeftVersion:   opt.HeftVersion,
		Created:       opt.Now.UTC().Format(time.RFC3339),
		Inputs:        opt.Inputs,
		Schema:        fr.Schema,
		Encoding:      enc,
		Propensity:    *g,
	}
	if outcome != nil {
		if m.Outcome, err = fitOutcomes(ctx, fr, X, t, terms, outcome.Kind, opt.GLM); err != nil {
			return nil, nil, nil, err
		}
	}
	e1, e0 := sortArms(e, t, n1)
	m.Diagnostics = diagnostics(fr, e, e1, e0, missing)
	m.Reference = reference(X, terms, e, e1, e0, t)
	if err := ctx.Err(); err != nil {
		return nil, nil, nil, err
	}
	if m.Checksum, err = m.ComputeChecksum(); err != nil {
		return nil, nil, nil, err
	}
	return m, e, t, nil
}

// invLogit is 1/(1+exp(−η)), computed without overflow for large |η|.
func invLogit(eta float64) float64 {
	if eta >= 0 {
		return 1 / (1 + math.Exp(-eta))
	}
	z := math.Exp(eta)
	return z / (1 + z)
}

// design encodes the frame into terms, column-major without the intercept.
func design(fr *Frame, enc *Encoding) Design {
	n := fr.N()
	X := Design{N: n}
	for k := range enc.Columns {
		s := &enc.Columns[k]
		c := &fr.Columns[k]
		var ind []float64
		if s.Kind == KindNumeric {
			if !s.MissingIndicator {
				X.Cols = append(X.Cols, c.Num) // shared with the frame, never written
				continue
			}
			x := make([]float64, n)
			ind = make([]float64, n)
			for i, v := range c.Num {
				if math.IsNaN(v) {
					x[i], ind[i] = s.Impute, 1
				} else {
					x[i] = v
				}
			}
			X.Cols = append(X.Cols, x, ind)
			continue
		}
		// Categorical: frame code → term offset, −1 for the reference.
		pos := make(map[string]int, len(s.Levels)+len(s.Pooled))
		for j, l := range s.Levels {
			pos[l] = j
		}
		for _, l := range s.Pooled {
			pos[l] = len(s.Levels)
		}
		byCode := make([]int, len(c.Dict))
		for code, text := range c.Dict {
			if p, ok := pos[text]; ok {
				byCode[code] = p
			} else {
				byCode[code] = -1 // the reference
			}
		}
		nLevels := s.nTerms()
		if s.MissingIndicator {
			nLevels--
			ind = make([]float64, n)
		}
		cols := make([][]float64, nLevels)
		for j := range cols {
			cols[j] = make([]float64, n)
		}
		for i, code := range c.Codes {
			switch {
			case code < 0:
				ind[i] = 1 // only present when the sample had missing values
			case byCode[code] >= 0:
				cols[byCode[code]][i] = 1
			}
		}
		X.Cols = append(X.Cols, cols...)
		if ind != nil {
			X.Cols = append(X.Cols, ind)
		}
	}
	return X
}

// fitOutcomes fits the outcome on the terms within each arm, over the rows
// whose outcome is not missing.
func fitOutcomes(ctx context.Context, fr *Frame, X Design, t []int8, terms []string, kind string, opt GLMOptions) (*OutcomeModels, error) {
	om := &OutcomeModels{Kind: kind}
	fitter := FitLinear
	if kind == "binary" {
		fitter = FitLogistic
	}
	yAll := fr.Outcome.Num
	// One set of buffers, sized for the larger arm, serves both arms in turn.
	var nArm [2]int
	for i, v := range yAll {
		if !math.IsNaN(v) {
			nArm[t[i]]++
		}
	}
	size := max(nArm[0], nArm[1])
	rows := make([]int32, 0, size)
	y := make([]float64, size)
	buf := make([][]float64, len(X.Cols))
	for j := range buf {
		buf[j] = make([]float64, size)
	}
	for _, arm := range []struct {
		t    int8
		name string
		dst  *GLM
	}{{1, "treated", &om.Treated}, {0, "control", &om.Control}} {
		rows = rows[:0]
		for i, v := range yAll {
			if t[i] == arm.t && !math.IsNaN(v) {
				rows = append(rows, int32(i))
			}
		}
		m := len(rows)
		sub := Design{N: m, Cols: make([][]float64, len(X.Cols))}
		for j, col := range X.Cols {
			c := buf[j][:m]
			for k, i := range rows {
				c[k] = col[i]
			}
			sub.Cols[j] = c
		}
		for k, i := range rows {
			y[k] = yAll[i]
		}
		g, err := fitter(ctx, sub, y[:m], terms, opt)
		if err != nil {
			return nil, fmt.Errorf("outcome model, %s arm (%d rows with an outcome): %w", arm.name, m, err)
		}
		*arm.dst = *g
	}
	return om, nil
}

// sortArms returns the ascending propensities of the treated and of the
// control rows, sorted concurrently; the diagnostics and the reference read
// every order statistic of e from these two.
func sortArms(e []float64, t []int8, n1 int) (e1, e0 []float64) {
	if e1, e0, ok := SortedArms(e, t); ok {
		return e1, e0
	}
	e1 = make([]float64, 0, n1)
	e0 = make([]float64, 0, len(e)-n1)
	for i, v := range e {
		if t[i] == 1 {
			e1 = append(e1, v)
		} else {
			e0 = append(e0, v)
		}
	}
	var wg sync.WaitGroup
	wg.Go(func() { slices.Sort(e1) })
	slices.Sort(e0)
	wg.Wait()
	return e1, e0
}

func diagnostics(fr *Frame, e, e1, e0 []float64, missing map[string]int) Diagnostics {
	n := len(e)
	d := Diagnostics{
		RowsRead:      fr.RowsRead,
		SampleRows:    n,
		Sampled:       fr.Sampled,
		NTreated:      len(e1),
		NControl:      len(e0),
		AUC:           aucSorted(e1, e0),
		MissingCounts: missing,
	}
	if fr.Sampled {
		d.Seed = fr.Seed
	}
	// Shares outside [0.01, 0.99] by binary search in the sorted arms.
	below := sort.SearchFloat64s(e1, 0.01) + sort.SearchFloat64s(e0, 0.01)
	above := len(e1) - upperBound(e1, 0.99) + len(e0) - upperBound(e0, 0.99)
	d.PropensityQuantiles = ArmQuantiles{Treated: QuantilesSorted(e1, propensityQs[:]), Control: QuantilesSorted(e0, propensityQs[:])}
	d.ShareBelow001 = float64(below) / float64(n)
	d.ShareAbove099 = float64(above) / float64(n)
	return d
}

// upperBound is the number of values of ascending s that are ≤ v.
func upperBound(s []float64, v float64) int {
	return sort.Search(len(s), func(i int) bool { return s[i] > v })
}

// reference summarizes every term and the propensities on the fit sample.
// Terms are summarized on GOMAXPROCS goroutines, each writing only its
// terms' slots, so the result does not depend on scheduling.
func reference(X Design, terms []string, e, e1, e0 []float64, t []int8) Reference {
	r := Reference{ShareTreated: float64(len(e1)) / float64(len(e))}
	r.Terms = make([]TermReference, len(X.Cols))
	var next atomic.Int64
	var wg sync.WaitGroup
	for range min(runtime.GOMAXPROCS(0), len(X.Cols)) {
		wg.Go(func() {
			var scratch []float64 // one copy per goroutine for every term's deciles
			for {
				j := int(next.Add(1) - 1)
				if j >= len(X.Cols) {
					return
				}
				col := X.Cols[j]
				tr := TermReference{Term: terms[j+1]}
				if ones, ok := binaryOnes(col); ok {
					tr.Edges = decilesBinary(len(col), ones)
				} else {
					if scratch == nil {
						scratch = make([]float64, len(col))
					}
					s := scratch[:len(col)]
					copy(s, col)
					tr.Edges = decilesSelect(s)
				}
				ms := meanSD3(col, t)
				tr.Mean, tr.SD = ms[0].mean, ms[0].sd
				tr.MeanTreated, tr.SDTreated = ms[1].mean, ms[1].sd
				tr.MeanControl, tr.SDControl = ms[2].mean, ms[2].sd
				r.Terms[j] = tr
			}
		})
	}
	wg.Wait()
	r.PropensityEdges = make([]float64, 51)
	for k := range r.PropensityEdges {
		r.PropensityEdges[k] = float64(k) / 50
	}
	r.PropensityCounts = histogramSorted(r.PropensityEdges, e1, e0)
	n := len(e1) + len(e0)
	at := mergedAt(e1, e0, ranksFor(n, decileQs[:]))
	r.PropensityDeciles = decilesBy(n, func(k int) float64 { return at[k] })
	// Bins (−∞, d_1], (d_1, d_2], …, (d_k, ∞): bin = number of deciles
	// below e, the rule the drift accumulator applies at score time.
	r.DecileCounts = make([]float64, len(r.PropensityDeciles)+1)
	prev := 0
	for b, d := range r.PropensityDeciles {
		atMost := upperBound(e1, d) + upperBound(e0, d)
		r.DecileCounts[b] = float64(atMost - prev)
		prev = atMost
	}
	r.DecileCounts[len(r.PropensityDeciles)] = float64(n - prev)
	return r
}

type meanSDPair struct{ mean, sd float64 }

// meanSD3 is the mean and the SD with n−1 (0 below two rows) of x over all
// rows, the treated and the control, two passes for accuracy. The three
// sums share the passes but each runs over its rows in row order, as three
// separate passes would, so the results are the same to the bit.
//
// The arm sums add v·[t = arm] without branching: for finite v a masked
// term is ±0, and adding ±0 leaves a sum that started at +0 unchanged (such
// a sum is never −0 under round-to-nearest). A non-finite v would turn a
// masked term into NaN, which reaches the sum, so a non-finite result is
// recomputed by meanSD3Direct.
func meanSD3(x []float64, t []int8) [3]meanSDPair {
	var sum, sum1, sum0, n1 float64
	for i, v := range x {
		m := float64(t[i])
		sum += v
		sum1 += v * m
		sum0 += v * (1 - m)
		n1 += m
	}
	n := [3]float64{float64(len(x)), n1, float64(len(x)) - n1}
	var mean [3]float64
	for k, s := range [3]float64{sum, sum1, sum0} {
		if n[k] > 0 {
			mean[k] = s / n[k]
		}
	}
	var ss, ss1, ss0 float64
	for i, v := range x {
		m := float64(t[i])
		d := v - mean[0]
		ss += d * d
		d = v - mean[1]
		ss1 += d * d * m
		d = v - mean[2]
		ss0 += d * d * (1 - m)
	}
	var out [3]meanSDPair
	for k, q := range [3]float64{ss, ss1, ss0} {
		if n[k] == 0 {
			continue
		}
		if math.IsNaN(mean[k]+q) || math.IsInf(mean[k]+q, 0) {
			return meanSD3Direct(x, t)
		}
		out[k].mean = mean[k]
		if n[k] > 1 {
			out[k].sd = math.Sqrt(q / (n[k] - 1))
		}
	}
	return out
}

// meanSD3Direct is meanSD3 adding each value only to its own arm's sums.
func meanSD3Direct(x []float64, t []int8) [3]meanSDPair {
	var n, sum [3]float64
	for i, v := range x {
		a := 2 - int(t[i]) // 1 treated, 2 control
		sum[0] += v
		n[0]++
		sum[a] += v
		n[a]++
	}
	var mean, ss [3]float64
	for k := range 3 {
		if n[k] > 0 {
			mean[k] = sum[k] / n[k]
		}
	}
	for i, v := range x {
		a := 2 - int(t[i])
		d := v - mean[0]
		ss[0] += d * d
		d = v - mean[a]
		ss[a] += d * d
	}
	var out [3]meanSDPair
	for k := range 3 {
		if n[k] == 0 {
			continue
		}
		out[k].mean = mean[k]
		if n[k] > 1 {
			out[k].sd = math.Sqrt(ss[k] / (n[k] - 1))
		}
	}
	return out
}
