package score

import (
	"errors"
	"fmt"
	"math"
	"slices"

	"github.com/heft-project/heft/fit"
	"github.com/heft-project/heft/pipeline"
)

// Scorer turns encoded batches into propensities, weights and outcome
// predictions. It is read-only after New, so workers may share one.
//
// The policy is applied per row in this order, the one place it is written
// down:
//
//  1. e = logistic(lp), lp the propensity model's linear predictor, computed
//     stably: 1/(1+exp(−lp)) for lp ≥ 0, exp(lp)/(1+exp(lp)) otherwise.
//  2. Clip: with Clip = ε > 0, e is bounded to [ε, 1−ε] (counted in
//     Clipped). Without clipping, e exactly 0 or 1 on a row with a treatment
//     is an error naming file, row group and row, never an infinite weight;
//     with trimming such a row is simply out of support (weight 0).
//  3. Weight for the estimand (see Weight), from the clipped e.
//  4. Stabilize: multiply by the fit sample's share of the row's arm,
//     ShareTreated or 1−ShareTreated (Robins, Hernán & Brumback 2000).
//  5. Truncate: w = min(w, Cap) (Cole & Hernán 2008); Truncated counts the
//     in-support rows whose weight was capped.
//  6. Trim: where e ∉ [α, 1−α], α = Trim, the weight is 0 and InSupport is
//     false (Crump, Hotz, Imbens & Mitnik 2009); Trimmed counts those rows.
//
// Rows with a null treatment (T = −1) get E and InSupport as above but no
// weight (WValid false, W 0). E is always the clipped propensity, the one
// the weight was computed from.
type Scorer struct {
	policy Policy
	est    kind
	share  float64 // fit-sample share treated, for stabilization
	prop   *fit.GLM
	mu0    *linear // nil without outcome models
	mu1    *linear
}

// linear is one outcome model and whether its mean is the logistic of the
// linear predictor (binomial) or the predictor itself (gaussian).
type linear struct {
	g        *fit.GLM
	logistic bool
}

// New prepares scoring with the model's propensity coefficients, and its
// outcome models when it has them: Mu0 and Mu1 are then always computed,
// because the accumulators need them whether or not they are written.
// A policy with TruncateQ but no Cap is resolved against m (Policy.Resolve).
func New(m *fit.Model, p Policy) (*Scorer, error) {
	if m == nil {
		return nil, errors.New("score: no model")
	}
	if err := p.Validate(); err != nil {
		return nil, err
	}
	if p.TruncateQ > 0 && p.Cap == 0 {
		var err error
		if p, err = p.Resolve(m); err != nil {
			return nil, err
		}
	}
	est, _ := estimandKind(p.Estimand)
	g := &m.Propensity
	if g.Family != fit.FamilyBinomial {
		return nil, fmt.Errorf("model file: propensity model family is %q, want %q", g.Family, fit.FamilyBinomial)
	}
	if err := checkGLM("propensity", g); err != nil {
		return nil, err
	}
	if m.Encoding.Treatment.Column != "" && len(g.Terms) > 0 {
		// The encoder produces Encoding.Terms(); coefficients for other
		// terms would be silently misapplied.
		want := m.Encoding.Terms()
		if !slices.Equal(want, g.Terms) {
			j := 0
			for j < len(want) && j < len(g.Terms) && want[j] == g.Terms[j] {
				j++
			}
			return nil, fmt.Errorf("model file: the propensity model's terms (%d) do not match the encoding's (%d), first at term %d (%q vs %q)",
				len(g.Terms), len(want), j, at(g.Terms, j), at(want, j))
		}
	}
	s := &Scorer{policy: p, est: est, share: m.Reference.ShareTreated, prop: coefOnly(g)}
	if p.Stabilize && !(s.share > 0 && s.share < 1) {
		return nil, fmt.Errorf("--stabilize: the model's share of treated rows is %v, want a value strictly between 0 and 1", s.share)
	}
	if o := m.Outcome; o != nil {
		for _, arm := range []struct {
			name string
			g    *fit.GLM
			dst  **linear
		}{{"control outcome", &o.Control, &s.mu0}, {"treated outcome", &o.Treated, &s.mu1}} {
			if err := checkGLM(arm.name, arm.g); err != nil {
				return nil, err
			}
			if len(arm.g.Coef) != len(g.Coef) {
				return nil, fmt.Errorf("model file: %s model has %d terms, the propensity model %d; they must share terms", arm.name, len(arm.g.Coef), len(g.Coef))
			}
			var lg bool
			switch arm.g.Family {
			case fit.FamilyBinomial:
				lg = true
			case fit.FamilyGaussian:
			default:
				return nil, fmt.Errorf("model file: %s model family %q is not %q or %q", arm.name, arm.g.Family, fit.FamilyBinomial, fit.FamilyGaussian)
			}
			*arm.dst = &linear{g: coefOnly(arm.g), logistic: lg}
		}
	}
	return s, nil
}

// coefOnly copies the coefficients, so later changes to the model do not
// reach a Scorer in use.
func coefOnly(g *fit.GLM) *fit.GLM {
	return &fit.GLM{Family: g.Family, Terms: g.Terms, Coef: append([]float64(nil), g.Coef...)}
}

func checkGLM(name string, g *fit.GLM) error {
	if len(g.Coef) == 0 {
		return fmt.Errorf("model file: %s model has no coefficients", name)
	}
	if len(g.Terms) != 0 && len(g.Terms) != len(g.Coef) {
		return fmt.Errorf("model file: %s model has %d terms but %d coefficients", name, len(g.Terms), len(g.Coef))
	}
	for j, c := range g.Coef {
		if math.IsNaN(c) || math.IsInf(c, 0) {
			return fmt.Errorf("model file: %s model coefficient %d (%s) is %v", name, j, termName(g, j), c)
		}
	}
	return nil
}

func at(s []string, j int) string {
	if j < len(s) {
		return s[j]
	}
	return "(none)"
}

func termName(g *fit.GLM, j int) string {
	if j < len(g.Terms) {
		return g.Terms[j]
	}
	return fmt.Sprintf("#%d", j)
}

// Policy returns the policy in force, with Cap resolved.
func (s *Scorer) Policy() Policy { return s.policy }

// WithoutOutcome returns a scorer that leaves Mu0 and Mu1 out, for a run
// that neither writes predictions nor accumulates estimates: two linear
// predictors per row saved.
func (s *Scorer) WithoutOutcome() *Scorer {
	c := *s
	c.mu0, c.mu1 = nil, nil
	return &c
}

// HasOutcome reports whether the scorer computes Mu0 and Mu1.
func (s *Scorer) HasOutcome() bool { return s.mu0 != nil }

// Score fills out from the encoded batch, reusing out's buffers. The linear
// predictor is accumulated a column at a time over b.X (sequential memory,
// no per-row allocation), then one pass turns it into e and w. loc locates
// errors: row i of the batch is row loc.Row+i of loc.File.
func (s *Scorer) Score(b *fit.Batch, loc pipeline.Location, out *Scores) error {
	n := b.N
	if len(b.X) != len(s.prop.Coef)-1 {
		return &pipeline.Error{File: loc.File, RowGroup: loc.RowGroup, Row: -1,
			Err: fmt.Errorf("encoded batch has %d terms, the model %d (besides the intercept)", len(b.X), len(s.prop.Coef)-1)}
	}
	for j, x := range b.X {
		if len(x) < n {
			return &pipeline.Error{File: loc.File, RowGroup: loc.RowGroup, Row: -1,
				Err: fmt.Errorf("encoded term %d has %d rows, the batch %d", j+1, len(x), n)}
		}
	}
	if len(b.T) < n {
		return &pipeline.Error{File: loc.File, RowGroup: loc.RowGroup, Row: -1,
			Err: fmt.Errorf("encoded treatment has %d rows, the batch %d", len(b.T), n)}
	}
	out.N = n
	out.E = grow(out.E, n)
	out.W = grow(out.W, n)
	out.WValid = growBool(out.WValid, n)
	out.InSupport = growBool(out.InSupport, n)
	out.Clipped, out.Trimmed, out.Truncated = 0, 0, 0

	x := fit.Design{N: n, Cols: b.X}
	fit.LinearPredictor(s.prop, x, out.E)
	if err := s.weigh(b.T[:n], loc, out); err != nil {
		return err
	}
	if s.mu0 == nil {
		out.Mu0, out.Mu1 = nil, nil
		return nil
	}
	out.Mu0 = grow(out.Mu0, n)
	out.Mu1 = grow(out.Mu1, n)
	s.mu0.predict(x, out.Mu0)
	s.mu1.predict(x, out.Mu1)
	return nil
}

// weigh turns the linear predictors in out.E into propensities and weights.
func (s *Scorer) weigh(t []int8, loc pipeline.Location, out *Scores) error {
	p := s.policy
	e, w, valid, in := out.E, out.W, out.WValid, out.InSupport
	lo, hi := p.Clip, 1-p.Clip
	tlo, thi := p.Trim, 1-p.Trim
	clip, trim, trunc := p.Clip > 0, p.Trim > 0, p.Cap > 0
	shareT, shareC := s.share, 1-s.share
	for i, lp := range e {
		if math.IsNaN(lp) {
			return &pipeline.Error{File: loc.File, RowGroup: loc.RowGroup, Row: loc.Row + int64(i),
				Err: errors.New("propensity linear predictor is NaN (a covariate value is NaN or infinite)")}
		}
		ei := logistic(lp)
		if clip {
			if ei < lo {
				ei = lo
				out.Clipped++
			} else if ei > hi {
				ei = hi
				out.Clipped++
			}
		} else if !trim && (ei == 0 || ei == 1) && t[i] >= 0 {
			return &pipeline.Error{File: loc.File, RowGroup: loc.RowGroup, Row: loc.Row + int64(i),
				Err: fmt.Errorf("propensity is exactly %v (linear predictor %.6g), so the weight would be infinite; bound propensities with --clip (for example --clip 1e-6)", ei, lp)}
		}
		e[i] = ei
		in[i] = !trim || (ei >= tlo && ei <= thi)
		if !in[i] {
			out.Trimmed++
		}
		ti := t[i]
		if ti != 0 && ti != 1 {
			w[i], valid[i] = 0, false
			continue
		}
		valid[i] = true
		if !in[i] {
			w[i] = 0
			continue
		}
		wi := weightOf(s.est, ti, ei)
		if p.Stabilize {
			if ti == 1 {
				wi *= shareT
			} else {
				wi *= shareC
			}
		}
		if trunc && wi > p.Cap {
			wi = p.Cap
			out.Truncated++
		}
		w[i] = wi
	}
	return nil
}

func (l *linear) predict(x fit.Design, out []float64) {
	fit.LinearPredictor(l.g, x, out)
	if l.logistic {
		for i, v := range out {
			out[i] = logistic(v)
		}
	}
}

// logistic is 1/(1+exp(−x)) evaluated without overflow: exp is only ever
// taken of a non-positive number.
func logistic(x float64) float64 {
	if x >= 0 {
		return 1 / (1 + math.Exp(-x))
	}
	z := math.Exp(x)
	return z / (1 + z)
}

func grow(s []float64, n int) []float64 {
	if cap(s) < n {
		return make([]float64, n)
	}
	return s[:n]
}

func growBool(s []bool, n int) []bool {
	if cap(s) < n {
		return make([]bool, n)
	}
	return s[:n]
}
