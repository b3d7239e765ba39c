package fit

import (
	"context"
	"errors"
	"fmt"
	"math"
	"slices"
	"sort"
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
	m.Diagnostics = diagnostics(fr, e, t, n1, missing)
	m.Reference = reference(X, terms, e, t, n1)
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

func diagnostics(fr *Frame, e []float64, t []int8, n1 int, missing map[string]int) Diagnostics {
	n := len(e)
	d := Diagnostics{
		RowsRead:      fr.RowsRead,
		SampleRows:    n,
		Sampled:       fr.Sampled,
		NTreated:      n1,
		NControl:      n - n1,
		AUC:           AUC(e, t),
		MissingCounts: missing,
	}
	if fr.Sampled {
		d.Seed = fr.Seed
	}
	e1 := make([]float64, 0, n1)
	e0 := make([]float64, 0, n-n1)
	var below, above int
	for i, v := range e {
		if t[i] == 1 {
			e1 = append(e1, v)
		} else {
			e0 = append(e0, v)
		}
		if v < 0.01 {
			below++
		}
		if v > 0.99 {
			above++
		}
	}
	d.PropensityQuantiles = ArmQuantiles{Treated: Quantiles(e1, propensityQs[:]), Control: Quantiles(e0, propensityQs[:])}
	d.ShareBelow001 = float64(below) / float64(n)
	d.ShareAbove099 = float64(above) / float64(n)
	return d
}

// reference summarizes every term and the propensities on the fit sample.
func reference(X Design, terms []string, e []float64, t []int8, n1 int) Reference {
	r := Reference{ShareTreated: float64(n1) / float64(len(e))}
	r.Terms = make([]TermReference, len(X.Cols))
	var sorted []float64 // one scratch copy for every term's deciles
	for j, col := range X.Cols {
		sorted = append(sorted[:0], col...)
		slices.Sort(sorted)
		tr := TermReference{Term: terms[j+1], Edges: decilesSorted(sorted)}
		tr.Mean, tr.SD = meanSD(col, t, -1)
		tr.MeanTreated, tr.SDTreated = meanSD(col, t, 1)
		tr.MeanControl, tr.SDControl = meanSD(col, t, 0)
		r.Terms[j] = tr
	}
	r.PropensityEdges = make([]float64, 51)
	for k := range r.PropensityEdges {
		r.PropensityEdges[k] = float64(k) / 50
	}
	r.PropensityCounts = Histogram(e, r.PropensityEdges)
	r.PropensityDeciles = DecileEdges(e)
	if r.PropensityDeciles == nil {
		r.PropensityDeciles = []float64{}
	}
	// Bins (−∞, d_1], (d_1, d_2], …, (d_k, ∞): bin = number of deciles
	// below e, the rule the drift accumulator applies at score time.
	r.DecileCounts = make([]float64, len(r.PropensityDeciles)+1)
	for _, v := range e {
		r.DecileCounts[sort.SearchFloat64s(r.PropensityDeciles, v)]++
	}
	return r
}

// decilesSorted is DecileEdges of a sorted column without NaN, sparing a
// copy per term.
func decilesSorted(s []float64) []float64 {
	out := make([]float64, 0, 9)
	if len(s) == 0 {
		return out
	}
	for k := 1; k <= 9; k++ {
		v := quantileSorted(s, float64(k)/10)
		if len(out) == 0 || v > out[len(out)-1] {
			out = append(out, v)
		}
	}
	return out
}

// meanSD is the mean and the SD with n−1 (0 below two rows) of x over the
// rows with t == arm, or all rows when arm < 0; two passes for accuracy.
func meanSD(x []float64, t []int8, arm int8) (mean, sd float64) {
	var n, sum float64
	for i, v := range x {
		if arm < 0 || t[i] == arm {
			sum += v
			n++
		}
	}
	if n == 0 {
		return 0, 0
	}
	mean = sum / n
	var ss float64
	for i, v := range x {
		if arm < 0 || t[i] == arm {
			d := v - mean
			ss += d * d
		}
	}
	if n > 1 {
		sd = math.Sqrt(ss / (n - 1))
	}
	return mean, sd
}
