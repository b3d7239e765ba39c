package aggregate

import (
	"encoding/json"
	"fmt"
	"io"
	"math"
	"sort"
	"strconv"
	"strings"
	"text/tabwriter"
	"unicode/utf8"

	"github.com/heft-project/heft/score"
)

// ReportVersion is the version of the report JSON schema (schema.md).
const ReportVersion = 1

// Caution closes every report.
const Caution = "Causal only under no unmeasured confounding, positivity and correctly specified models; decisions about people need domain review."

// smdWarn is the weighted |SMD| above which a term is called imbalanced
// when no gate is set: the 0.1 rule of thumb of Austin (2009, "Balance
// diagnostics for comparing the distribution of baseline covariates between
// treatment groups in propensity-score matched samples", Stat. Med. 28(25)).
const smdWarn = 0.1

// essWarn is the ESS share below which the report warns (common practice,
// no source).
const essWarn = 0.1

// Float is a report figure: a JSON number, or null where it is undefined
// (NaN or infinite), since JSON has no such numbers. null reads back as NaN.
type Float float64

// MarshalJSON writes f, or null when it is not finite.
func (f Float) MarshalJSON() ([]byte, error) {
	v := float64(f)
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return []byte("null"), nil
	}
	return json.Marshal(v)
}

// UnmarshalJSON reads a number, or null as NaN.
func (f *Float) UnmarshalJSON(b []byte) error {
	if string(b) == "null" {
		*f = Float(math.NaN())
		return nil
	}
	var v float64
	if err := json.Unmarshal(b, &v); err != nil {
		return err
	}
	*f = Float(v)
	return nil
}

// Arms holds one figure per arm.
type Arms struct {
	Treated Float `json:"treated"`
	Control Float `json:"control"`
}

// ArmCounts holds one count per arm.
type ArmCounts struct {
	Treated int64 `json:"treated"`
	Control int64 `json:"control"`
}

// EstimateReport is one effect estimate with its standard errors and 95%
// confidence interval, as the effects accumulator gives it.
type EstimateReport struct {
	Estimate               Float `json:"estimate"`
	SE                     Float `json:"se"`
	SEWithModelUncertainty Float `json:"se_with_model_uncertainty"`
	CILow                  Float `json:"ci_low"`
	CIHigh                 Float `json:"ci_high"`
}

// BalanceRow is the balance of one term under the run's weights.
type BalanceRow struct {
	Term                  string `json:"term"`
	MeanTreated           Float  `json:"mean_treated"`
	MeanControl           Float  `json:"mean_control"`
	MeanTreatedWeighted   Float  `json:"mean_treated_weighted"`
	MeanControlWeighted   Float  `json:"mean_control_weighted"`
	VarTreated            Float  `json:"var_treated"`
	VarControl            Float  `json:"var_control"`
	VarTreatedWeighted    Float  `json:"var_treated_weighted"`
	VarControlWeighted    Float  `json:"var_control_weighted"`
	SMDUnweighted         Float  `json:"smd_unweighted"`
	SMDWeighted           Float  `json:"smd_weighted"`
	VarianceRatioWeighted Float  `json:"variance_ratio_weighted"`
	KSWeighted            Float  `json:"ks_weighted"`
}

// WeightShare is one large weight and its share of its arm's Σw.
type WeightShare struct {
	Weight Float `json:"weight"`
	Share  Float `json:"share"`
}

// Overlap describes the propensity distribution per arm and the weights'
// tail.
type Overlap struct {
	Edges  []float64 `json:"propensity_edges"`
	Counts struct {
		Treated []int64 `json:"treated"`
		Control []int64 `json:"control"`
	} `json:"counts"`
	Weighted struct {
		Treated []Float `json:"treated"`
		Control []Float `json:"control"`
	} `json:"weighted"`
	// BelowLow and AboveHigh count rows with e < 0.01 and e > 0.99 (e as
	// used for the weight, after clipping), per arm, and their shares.
	BelowLow       ArmCounts `json:"e_below_0_01"`
	AboveHigh      ArmCounts `json:"e_above_0_99"`
	ShareBelowLow  Arms      `json:"share_e_below_0_01"`
	ShareAboveHigh Arms      `json:"share_e_above_0_99"`
	Clipped        int64     `json:"clipped"`
	Trimmed        int64     `json:"trimmed"`
	Truncated      int64     `json:"truncated"`
	// WithoutWeight counts rows with a treatment but no finite weight.
	WithoutWeight  int64 `json:"rows_without_finite_weight"`
	LargestWeights struct {
		Treated []WeightShare `json:"treated"`
		Control []WeightShare `json:"control"`
	} `json:"largest_weights"`
	LargestWeightsShare Arms `json:"largest_weights_share"`
}

// TermShift is a term's mean shift since the fit.
type TermShift struct {
	Term    string  `json:"term"`
	Mean    Float   `json:"mean"`
	MeanFit float64 `json:"mean_fit"`
	SDFit   float64 `json:"sd_fit"`
	ShiftSD Float   `json:"shift_sd"`
}

// Drift compares this run with the fit sample.
type Drift struct {
	PSI             Float            `json:"psi"`
	Deciles         []float64        `json:"propensity_deciles"`
	DecileCounts    []int64          `json:"decile_counts"`
	FitDecileCounts []float64        `json:"fit_decile_counts"`
	Terms           []TermShift      `json:"terms"`
	Unseen          map[string]int64 `json:"unseen"`
	Missing         map[string]int64 `json:"missing"`
}

// SegmentReport is one segment of the By columns.
type SegmentReport struct {
	By                map[string]string                    `json:"by"`
	Rows              int64                                `json:"rows"`
	Treated           int64                                `json:"treated"`
	Control           int64                                `json:"control"`
	NullTreatment     int64                                `json:"null_treatment"`
	Suppressed        bool                                 `json:"suppressed"`
	Estimates         map[string]map[string]EstimateReport `json:"estimates,omitempty"`
	ESS               Arms                                 `json:"ess"`
	MaxAbsSMDWeighted Float                                `json:"max_abs_smd_weighted"`
}

// values are the segment's values in the order of by.
func (g *SegmentReport) values(by []string) []string {
	v := make([]string, len(by))
	for k, c := range by {
		v[k] = g.By[c]
	}
	return v
}

// Report is everything a run found, ready for JSON (schema.md) or text.
type Report struct {
	ReportVersion int                                  `json:"report_version"`
	Rows          int64                                `json:"rows"`
	Treated       int64                                `json:"treated"`
	Control       int64                                `json:"control"`
	NullTreatment int64                                `json:"null_treatment"`
	NullOutcome   int64                                `json:"null_outcome"`
	Estimand      string                               `json:"estimand"`
	Policy        score.Policy                         `json:"policy"`
	ModelChecksum string                               `json:"model_checksum"`
	ModelCreated  string                               `json:"model_created"`
	Inputs        []string                             `json:"inputs"`
	RunSeconds    float64                              `json:"run_seconds"`
	Estimates     map[string]map[string]EstimateReport `json:"estimates"`
	ESS           Arms                                 `json:"ess"`
	ESSShare      Arms                                 `json:"ess_share"`
	SumWeights    Arms                                 `json:"sum_weights"`
	Balance       []BalanceRow                         `json:"balance"`
	Overlap       Overlap                              `json:"overlap"`
	Drift         Drift                                `json:"drift"`
	Gate          GateResult                           `json:"gate"`
	By            []string                             `json:"by,omitempty"`
	Segments      []SegmentReport                      `json:"segments,omitempty"`
	Warnings      []string                             `json:"warnings"`
	Caution       string                               `json:"caution"`
}

// Failed reports whether a gate was checked and not met.
func (r *Report) Failed() bool { return r.Gate.Checked && !r.Gate.Passed }

// Report computes the report from the state. The state is not changed.
func (s *State) Report() *Report {
	sh, a := s.sh, &s.a
	m := sh.model
	est := sh.policy.Estimand
	w := &a.Whole
	r := &Report{
		ReportVersion: ReportVersion,
		Rows:          w.Rows, Treated: w.N[1], Control: w.N[0],
		NullTreatment: w.NullTreatment, NullOutcome: a.NullOutcome,
		Estimand: est, Policy: sh.policy,
		ModelChecksum: m.Checksum, ModelCreated: m.Created,
		Inputs: append([]string{}, s.Inputs...), RunSeconds: s.RunSeconds,
		Estimates:  estimates(w.Effects.Estimates(m)),
		ESS:        Arms{Treated: Float(w.ess(1)), Control: Float(w.ess(0))},
		SumWeights: Arms{Treated: Float(w.SumW[1].Value()), Control: Float(w.SumW[0].Value())},
		Balance:    balanceRows(sh.terms, w.Balance, est),
		Caution:    Caution,
		Warnings:   []string{},
	}
	r.ESSShare = Arms{Treated: share(r.ESS.Treated, w.N[1]), Control: share(r.ESS.Control, w.N[0])}
	r.Overlap = overlapReport(a, w)
	r.Drift = driftReport(sh, a, w)
	r.Gate = sh.set.Gate.evaluate(r.Balance, w.N, r.ESS, r.Drift.PSI)
	if sh.seg != nil {
		r.By = append([]string{}, sh.set.By...)
		for _, g := range s.sortedSegments() {
			r.Segments = append(r.Segments, segmentReport(sh, g))
		}
	}
	r.Warnings = warnings(sh, a, r)
	return r
}

func share(v Float, n int64) Float {
	if n <= 0 {
		return Float(math.NaN())
	}
	return v / Float(n)
}

// fmtCount writes an effective count to the nearest unit.
func fmtCount(v float64) string {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return "-"
	}
	return strconv.FormatFloat(math.Round(v), 'f', 0, 64)
}

// estimates converts the effect estimates for the report, leaving out the
// undefined ones (an estimate that is not a finite number: no outcome
// values, or an empty arm), as the schema promises.
func estimates(e map[string]map[string]Estimate) map[string]map[string]EstimateReport {
	out := map[string]map[string]EstimateReport{}
	for estimand, byEst := range e {
		m := map[string]EstimateReport{}
		for name, v := range byEst {
			if math.IsNaN(v.Estimate) || math.IsInf(v.Estimate, 0) {
				continue
			}
			m[name] = EstimateReport{Float(v.Estimate), Float(v.SE), Float(v.SEWithModelUncertainty), Float(v.CILow), Float(v.CIHigh)}
		}
		if len(m) > 0 {
			out[estimand] = m
		}
	}
	return out
}

func balanceRows(terms []string, b *balance, estimand string) []BalanceRow {
	rows := make([]BalanceRow, len(terms))
	for j, t := range terms {
		v := b.term(j, estimand)
		rows[j] = BalanceRow{
			Term:        t,
			MeanTreated: Float(v.MeanT), MeanControl: Float(v.MeanC),
			MeanTreatedWeighted: Float(v.MeanTW), MeanControlWeighted: Float(v.MeanCW),
			VarTreated: Float(v.VarT), VarControl: Float(v.VarC),
			VarTreatedWeighted: Float(v.VarTW), VarControlWeighted: Float(v.VarCW),
			SMDUnweighted: Float(v.SMD), SMDWeighted: Float(v.SMDW),
			VarianceRatioWeighted: Float(v.VarRatioW), KSWeighted: Float(v.KSW),
		}
	}
	return rows
}

func overlapReport(a *accum, w *cell) Overlap {
	o := a.Overlap
	var r Overlap
	r.Edges = append([]float64{}, o.edges...)
	r.Counts.Treated = append([]int64{}, o.Counts[1]...)
	r.Counts.Control = append([]int64{}, o.Counts[0]...)
	r.Weighted.Treated = sumsToFloats(o.Weighted[1])
	r.Weighted.Control = sumsToFloats(o.Weighted[0])
	r.BelowLow = ArmCounts{Treated: o.Below[1], Control: o.Below[0]}
	r.AboveHigh = ArmCounts{Treated: o.Above[1], Control: o.Above[0]}
	r.ShareBelowLow = Arms{Treated: share(Float(o.Below[1]), w.N[1]), Control: share(Float(o.Below[0]), w.N[0])}
	r.ShareAboveHigh = Arms{Treated: share(Float(o.Above[1]), w.N[1]), Control: share(Float(o.Above[0]), w.N[0])}
	r.Clipped, r.Trimmed, r.Truncated = a.Clipped, a.Trimmed, a.Truncated
	r.WithoutWeight = a.BadWeight
	top := func(arm int) ([]WeightShare, Float) {
		list := []WeightShare{}
		sw := w.SumW[arm].Value()
		var sum Sum
		for _, v := range o.Top[arm] {
			list = append(list, WeightShare{Weight: Float(v), Share: Float(v / sw)})
			sum.Add(v)
		}
		if !(sw > 0) {
			return list, Float(math.NaN())
		}
		return list, Float(sum.Value() / sw)
	}
	r.LargestWeights.Treated, r.LargestWeightsShare.Treated = top(1)
	r.LargestWeights.Control, r.LargestWeightsShare.Control = top(0)
	return r
}

func sumsToFloats(s []Sum) []Float {
	f := make([]Float, len(s))
	for i, v := range s {
		f[i] = Float(v.Value())
	}
	return f
}

func driftReport(sh *shared, a *accum, w *cell) Drift {
	ref := &sh.model.Reference
	d := Drift{
		Deciles:         append([]float64{}, ref.PropensityDeciles...),
		DecileCounts:    append([]int64{}, a.Drift.Counts...),
		FitDecileCounts: append([]float64{}, ref.DecileCounts...),
		Unseen:          copyCounts(a.Unseen),
		Missing:         copyCounts(a.Missing),
		PSI:             Float(psi(a.Drift.Counts, ref.DecileCounts)),
	}
	d.Terms = make([]TermShift, len(sh.terms))
	for j, t := range sh.terms {
		all := w.Balance.U[0][j]
		all.Merge(w.Balance.U[1][j])
		mean := math.NaN()
		if all.W > 0 {
			mean = all.Mean
		}
		tr := ref.Terms[j]
		d.Terms[j] = TermShift{Term: t, Mean: Float(mean), MeanFit: tr.Mean, SDFit: tr.SD, ShiftSD: Float(meanShift(mean, tr.Mean, tr.SD))}
	}
	return d
}

func copyCounts(m map[string]int64) map[string]int64 {
	c := make(map[string]int64, len(m))
	for k, v := range m {
		c[k] = v
	}
	return c
}

func segmentReport(sh *shared, g *segment) SegmentReport {
	vals := g.text()
	r := SegmentReport{
		By:   make(map[string]string, len(vals)),
		Rows: g.Rows, Treated: g.N[1], Control: g.N[0], NullTreatment: g.NullTreatment,
		ESS: Arms{Treated: Float(g.ess(1)), Control: Float(g.ess(0))},
	}
	for i, c := range sh.set.By {
		r.By[c] = vals[i]
	}
	worst := math.NaN()
	for j := range sh.terms {
		v := math.Abs(g.Balance.term(j, sh.policy.Estimand).SMDW)
		if !math.IsNaN(v) && !(v <= worst) {
			worst = v
		}
	}
	r.MaxAbsSMDWeighted = Float(worst)
	least := int64(sh.set.MinSegmentRows)
	r.Suppressed = g.N[0] < least || g.N[1] < least
	if !r.Suppressed {
		r.Estimates = estimates(g.Effects.Estimates(sh.model))
	}
	return r
}

func warnings(sh *shared, a *accum, r *Report) []string {
	var ws []string
	for _, f := range r.Gate.Failures {
		ws = append(ws, "Gate failed: "+f.Message+".")
	}
	if r.NullTreatment > 0 {
		ws = append(ws, fmt.Sprintf("%d rows with a null treatment were left out of every figure.", r.NullTreatment))
	}
	if a.BadWeight > 0 {
		ws = append(ws, fmt.Sprintf("%d rows had no finite weight and were left out of the weighted figures.", a.BadWeight))
	}
	for _, arm := range []struct {
		name        string
		n           int64
		below, abov int64
		essShare    Float
	}{
		{"treated", r.Treated, r.Overlap.BelowLow.Treated, r.Overlap.AboveHigh.Treated, r.ESSShare.Treated},
		{"control", r.Control, r.Overlap.BelowLow.Control, r.Overlap.AboveHigh.Control, r.ESSShare.Control},
	} {
		if arm.n == 0 {
			ws = append(ws, fmt.Sprintf("No %s rows: effects and balance are undefined.", arm.name))
			continue
		}
		if arm.below > 0 || arm.abov > 0 {
			ws = append(ws, fmt.Sprintf("Positivity: %s of %s rows have a propensity below 0.01 and %s above 0.99.",
				fmtPct(float64(arm.below)/float64(arm.n)), arm.name, fmtPct(float64(arm.abov)/float64(arm.n))))
		}
		if v := float64(arm.essShare); v < essWarn {
			ws = append(ws, fmt.Sprintf("The %s effective sample size is %s of the %s rows: a few rows carry most of the weight.", arm.name, fmtPct(v), arm.name))
		}
	}
	if !(sh.set.Gate.MaxSMD > 0) {
		var terms []string
		for _, b := range r.Balance {
			if math.Abs(float64(b.SMDWeighted)) > smdWarn {
				terms = append(terms, b.Term)
			}
		}
		if len(terms) > 0 {
			ws = append(ws, fmt.Sprintf("Weighted |SMD| above %g for %s.", smdWarn, strings.Join(terms, ", ")))
		}
	}
	if p := float64(r.Drift.PSI); p > psiAlarm {
		ws = append(ws, fmt.Sprintf("Drift: the propensity PSI against the fit sample is %.3f, above the usual alarm level %g; consider refitting.", p, psiAlarm))
	} else if p > psiWatch {
		ws = append(ws, fmt.Sprintf("Drift: the propensity PSI against the fit sample is %.3f, a moderate shift (above %g).", p, psiWatch))
	}
	for _, c := range sortedKeys(a.Unseen) {
		if n := a.Unseen[c]; n > 0 {
			ws = append(ws, fmt.Sprintf("%d values of column %q were not seen at fit and were encoded as its reference level.", n, c))
		}
	}
	var supp int
	for _, g := range r.Segments {
		if g.Suppressed {
			supp++
		}
	}
	if supp > 0 {
		ws = append(ws, fmt.Sprintf("%d of %d segments have fewer than %d rows in an arm; their estimates are suppressed.", supp, len(r.Segments), sh.set.MinSegmentRows))
	}
	if ws == nil {
		ws = []string{}
	}
	return ws
}

func sortedKeys(m map[string]int64) []string {
	k := make([]string, 0, len(m))
	for c := range m {
		k = append(k, c)
	}
	sort.Strings(k)
	return k
}

// WriteJSON writes the report as indented JSON.
func (r *Report) WriteJSON(w io.Writer) error {
	b, err := json.MarshalIndent(r, "", "  ")
	if err != nil {
		return fmt.Errorf("report: %w", err)
	}
	_, err = w.Write(append(b, '\n'))
	return err
}

// WriteFile writes the report's JSON (WriteJSON) to path atomically:
// either the whole report appears there or nothing changes.
func (r *Report) WriteFile(path string) error {
	b, err := json.MarshalIndent(r, "", "  ")
	if err != nil {
		return fmt.Errorf("report: %w", err)
	}
	return writeAtomic(path, append(b, '\n'))
}

// WriteText writes a summary for a terminal: estimates with 95% confidence
// intervals, effective sample sizes, the balance table, overlap counts,
// segments, warnings and the caution.
func (r *Report) WriteText(w io.Writer) error {
	ew := &errWriter{w: w}
	p := func(format string, args ...any) { fmt.Fprintf(ew, format, args...) }
	p("heft report (%s weights", strings.ToUpper(r.Estimand))
	if r.Policy.Stabilize {
		p(", stabilized")
	}
	if r.Policy.Clip > 0 {
		p(", clip %g", r.Policy.Clip)
	}
	if r.Policy.Trim > 0 {
		p(", trim %g", r.Policy.Trim)
	}
	if r.Policy.TruncateQ > 0 {
		p(", truncate at q %g = %.4g", r.Policy.TruncateQ, r.Policy.Cap)
	}
	p(")\n")
	p("model    %s  (fit %s)\n", r.ModelChecksum, r.ModelCreated)
	if len(r.Inputs) > 0 {
		p("inputs   %s\n", strings.Join(r.Inputs, ", "))
	}
	p("rows     %d  (treated %d, control %d, null treatment %d, null outcome %d)", r.Rows, r.Treated, r.Control, r.NullTreatment, r.NullOutcome)
	if r.RunSeconds > 0 {
		p(" in %.1f s", r.RunSeconds)
	}
	p("\n\n")

	p("Estimates (95%% confidence intervals)\n")
	tw := tabwriter.NewWriter(ew, 0, 0, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintf(tw, "%-8s\t%-9s\testimate\tSE\tSE (model)\t95%% CI\t\n", "estimand", "estimator")
	n := 0
	for _, estimand := range score.Estimands {
		byEst, ok := r.Estimates[estimand]
		if !ok {
			continue
		}
		for _, name := range sortedEstimators(byEst) {
			e := byEst[name]
			fmt.Fprintf(tw, "%-8s\t%-9s\t%s\t%s\t%s\t[%s, %s]\t\n", estimand, name, fmtG(float64(e.Estimate)), fmtG(float64(e.SE)),
				fmtG(float64(e.SEWithModelUncertainty)), fmtG(float64(e.CILow)), fmtG(float64(e.CIHigh)))
			n++
		}
	}
	tw.Flush()
	if n == 0 {
		p("  (none: no outcome, or an arm without rows)\n")
	}
	p("\nEffective sample size (Kish)  treated %s of %d (%s), control %s of %d (%s)\n\n",
		fmtCount(float64(r.ESS.Treated)), r.Treated, fmtPct(float64(r.ESSShare.Treated)),
		fmtCount(float64(r.ESS.Control)), r.Control, fmtPct(float64(r.ESSShare.Control)))

	p("Balance (%s weights; SMD denominator from unweighted variances)\n", strings.ToUpper(r.Estimand))
	tw = tabwriter.NewWriter(ew, 0, 0, 2, ' ', tabwriter.AlignRight)
	termW := width("term")
	for _, b := range r.Balance {
		termW = max(termW, width(b.Term))
	}
	fmt.Fprintf(tw, "%s\tmean T\tmean C\tmean T (w)\tmean C (w)\tSMD\tSMD (w)\tvar ratio (w)\tKS (w)\t\n", pad("term", termW))
	for _, b := range r.Balance {
		fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t\n", pad(b.Term, termW),
			fmtG(float64(b.MeanTreated)), fmtG(float64(b.MeanControl)),
			fmtG(float64(b.MeanTreatedWeighted)), fmtG(float64(b.MeanControlWeighted)),
			fmtF(float64(b.SMDUnweighted)), fmtF(float64(b.SMDWeighted)),
			fmtF(float64(b.VarianceRatioWeighted)), fmtF(float64(b.KSWeighted)))
	}
	tw.Flush()

	o := &r.Overlap
	p("\nOverlap\n")
	tw = tabwriter.NewWriter(ew, 0, 0, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintf(tw, "arm    \trows\te < 0.01\te > 0.99\ttop %d weights' share\tlargest weight\t\n", topK)
	largest := func(l []WeightShare) string {
		if len(l) == 0 {
			return "-"
		}
		return fmtG(float64(l[0].Weight))
	}
	fmt.Fprintf(tw, "treated\t%d\t%d\t%d\t%s\t%s\t\n", r.Treated, o.BelowLow.Treated, o.AboveHigh.Treated, fmtPct(float64(o.LargestWeightsShare.Treated)), largest(o.LargestWeights.Treated))
	fmt.Fprintf(tw, "control\t%d\t%d\t%d\t%s\t%s\t\n", r.Control, o.BelowLow.Control, o.AboveHigh.Control, fmtPct(float64(o.LargestWeightsShare.Control)), largest(o.LargestWeights.Control))
	tw.Flush()
	p("clipped %d, trimmed %d, truncated %d\n", o.Clipped, o.Trimmed, o.Truncated)
	p("\nDrift since the fit: propensity PSI %s\n", fmtF(float64(r.Drift.PSI)))

	if len(r.Segments) > 0 {
		p("\nSegments by %s\n", strings.Join(r.By, ", "))
		tw = tabwriter.NewWriter(ew, 0, 0, 2, ' ', tabwriter.AlignRight)
		widths := make([]int, len(r.By))
		for k, c := range r.By {
			widths[k] = width(c)
			for _, g := range r.Segments {
				widths[k] = max(widths[k], width(g.By[c]))
			}
		}
		left := func(vals []string) string {
			cells := make([]string, len(vals))
			for k, v := range vals {
				cells[k] = pad(v, widths[k])
			}
			return strings.Join(cells, "\t")
		}
		fmt.Fprintf(tw, "%s\trows\ttreated\tcontrol\tESS T\tESS C\tmax |SMD| (w)\testimate (%s)\t95%% CI\t\n", left(r.By), r.Estimand)
		for _, g := range r.Segments {
			est, ci := "suppressed", ""
			if !g.Suppressed {
				est, ci = "-", ""
				if e, name, ok := mainEstimate(g.Estimates, r.Estimand); ok {
					est = fmtG(float64(e.Estimate)) + " " + name
					ci = "[" + fmtG(float64(e.CILow)) + ", " + fmtG(float64(e.CIHigh)) + "]"
				}
			}
			fmt.Fprintf(tw, "%s\t%d\t%d\t%d\t%s\t%s\t%s\t%s\t%s\t\n", left(g.values(r.By)), g.Rows, g.Treated, g.Control,
				fmtCount(float64(g.ESS.Treated)), fmtCount(float64(g.ESS.Control)), fmtF(float64(g.MaxAbsSMDWeighted)), est, ci)
		}
		tw.Flush()
	}

	if r.Gate.Checked {
		if r.Gate.Passed {
			p("\nGate: passed\n")
		} else {
			p("\nGate: FAILED\n")
		}
	}
	if len(r.Warnings) > 0 {
		p("\nWarnings\n")
		for _, s := range r.Warnings {
			p("  - %s\n", s)
		}
	}
	p("\n%s\n", r.Caution)
	return ew.err
}

// mainEstimate picks the estimate a one-line summary shows: AIPW when
// there is one, else Hájek, else IPW.
func mainEstimate(e map[string]map[string]EstimateReport, estimand string) (EstimateReport, string, bool) {
	for _, name := range []string{"aipw", "hajek", "ipw"} {
		if v, ok := e[estimand][name]; ok {
			return v, name, true
		}
	}
	return EstimateReport{}, "", false
}

func sortedEstimators(m map[string]EstimateReport) []string {
	order := map[string]int{"ipw": 0, "hajek": 1, "aipw": 2}
	k := make([]string, 0, len(m))
	for name := range m {
		k = append(k, name)
	}
	sort.Slice(k, func(i, j int) bool {
		oi, iok := order[k[i]]
		oj, jok := order[k[j]]
		if iok && jok {
			return oi < oj
		}
		if iok != jok {
			return iok
		}
		return k[i] < k[j]
	})
	return k
}

func fmtG(v float64) string {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return "-"
	}
	return strconv.FormatFloat(v, 'g', 5, 64)
}

func fmtF(v float64) string {
	switch {
	case math.IsNaN(v):
		return "-"
	case math.IsInf(v, 1):
		return "inf"
	case math.IsInf(v, -1):
		return "-inf"
	}
	return strconv.FormatFloat(v, 'f', 3, 64)
}

func fmtPct(v float64) string {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return "-"
	}
	return strconv.FormatFloat(100*v, 'f', 1, 64) + "%"
}

// width is a string's width in a terminal, counting runes. pad fills it
// with spaces to n: tabwriter aligns every column right, so the text
// columns are padded to be read left-aligned.
func width(s string) int { return utf8.RuneCountInString(s) }

func pad(s string, n int) string { return s + strings.Repeat(" ", max(n-width(s), 0)) }

// errWriter keeps the first write error so the text writer can check once.
type errWriter struct {
	w   io.Writer
	err error
}

func (e *errWriter) Write(p []byte) (int, error) {
	if e.err != nil {
		return 0, e.err
	}
	n, err := e.w.Write(p)
	e.err = err
	return n, err
}
