package htmlreport

import (
	"fmt"
	"maps"
	"math"
	"slices"
	"sort"
	"strconv"
	"strings"

	"github.com/heft-project/heft/aggregate"
	"github.com/heft-project/heft/score"
)

// defaultMaxSMD is the weighted |SMD| the balance chart's target zone ends
// at when the run set no --max-smd gate: the 0.1 rule of thumb of Austin
// (2009, "Balance diagnostics for comparing the distribution of baseline
// covariates between treatment groups in propensity-score matched samples",
// Stat. Med. 28(25)), the level the report's own warning uses.
const defaultMaxSMD = 0.1

// PSI levels called moderate and large shifts, as in the report's warnings
// (common practice in credit scoring, no single published source).
const (
	psiWatch = 0.10
	psiAlarm = 0.25
)

// estimandText says whom each estimand is about, for the plain-language
// lines; %s is the population's plural noun.
var estimandText = map[string]struct{ Name, Whom string }{
	score.ATE:     {"ATE (average treatment effect)", "all %s"},
	score.ATT:     {"ATT (effect on the treated)", "the treated %s"},
	score.ATC:     {"ATC (effect on the controls)", "the control %s"},
	score.Overlap: {"Overlap-weighted effect (ATO)", "the %s where both arms are common (overlap weights)"},
}

var estimatorName = map[string]string{"ipw": "IPW (Horvitz–Thompson)", "hajek": "Hájek", "aipw": "AIPW (doubly robust)"}

// view is everything the page template shows, formatted.
type view struct {
	Title, HeftVersion string
	Checksum           string
	OverlapBins        int
	Header             []kv
	Terms              string
	Gate               gateView
	Warnings           []string
	Caution            string
	Effects            []effectRow
	Sentences          []string
	NoEffects          bool

	SMDThreshold  string
	Balance       []balanceView
	BalanceFails  int
	BalanceShown  int // rows in the chart
	OverlapArms   []overlapArm
	OverlapTotals []kv
	WeightArms    []weightArm
	PSI, PSINote  string
	DriftTerms    []driftView
	DriftShown    int
	Unseen        []kv
	Missing       []kv
	SegmentBy     []string
	Segments      []segmentView
	SegmentsMain  string

	Charts map[string]string // chart name → inline SVG (trusted: made here)
}

type kv struct{ K, V string }

type gateView struct {
	Status, Class string
	Failures      []string
}

type effectRow struct {
	Estimand, EstimandKey, EstimandName               string
	Estimator, EstimatorKey                           string
	Estimate, SE, SEModel, CILow, CIHigh, Run, RowCls string
}

type balanceView struct {
	Term, MeanTW, MeanCW, SMDU, SMDW, VarRatio, KS, Status, Class string
}

type overlapArm struct{ Arm, Rows, Below, BelowShare, Above, AboveShare string }

type weightArm struct{ Arm, Rows, SumW, MeanW, ESS, ESSShare, Largest, TopShare string }

type driftView struct{ Term, MeanFit, Mean, Shift string }

type segmentView struct {
	Values                                     []string
	Rows, Treated, Control, ESST, ESSC, MaxSMD string
	Estimate, CI                               string
	Suppressed                                 bool
}

// figures are the chart inputs taken from a report.
type figures struct {
	balance   []balanceRow
	threshold float64
	overlap   overlapFig
	weights   weightsFig
	drift     []driftTerm
}

func f64(v aggregate.Float) float64 { return float64(v) }

// smdThreshold is the gate's --max-smd, else the default.
func smdThreshold(r *aggregate.Report) float64 {
	if t := r.Gate.Thresholds.MaxSMD; t > 0 {
		return t
	}
	return defaultMaxSMD
}

// newFigures takes the charts' data from r.
func newFigures(r *aggregate.Report) figures {
	f := figures{threshold: smdThreshold(r)}
	for _, b := range r.Balance {
		u, w := math.Abs(f64(b.SMDUnweighted)), math.Abs(f64(b.SMDWeighted))
		f.balance = append(f.balance, balanceRow{
			Term: b.Term, Unweighted: u, Weighted: w,
			VarRatio: f64(b.VarianceRatioWeighted), KS: f64(b.KSWeighted),
			Fails: !(w <= f.threshold),
		})
	}
	// Worst first; not computable counts as worst. Stable, so ties keep the
	// model's term order.
	sort.SliceStable(f.balance, func(i, j int) bool {
		return worse(f.balance[i].Weighted, f.balance[j].Weighted)
	})

	o := &r.Overlap
	f.overlap = overlapFig{
		Edges:   o.Edges,
		Counts:  [2][]int64{o.Counts.Control, o.Counts.Treated},
		Below:   [2]int64{o.BelowLow.Control, o.BelowLow.Treated},
		Above:   [2]int64{o.AboveHigh.Control, o.AboveHigh.Treated},
		Clip:    r.Policy.Clip,
		Trim:    r.Policy.Trim,
		Clipped: o.Clipped,
		Trimmed: o.Trimmed,
	}

	top := func(l []aggregate.WeightShare) []float64 {
		out := make([]float64, 0, len(l))
		for _, w := range l {
			out = append(out, f64(w.Weight))
		}
		return out
	}
	n := [2]int64{r.Control, r.Treated}
	sw := [2]float64{f64(r.SumWeights.Control), f64(r.SumWeights.Treated)}
	f.weights = weightsFig{
		BinRows:  [2][]int64{o.Counts.Control, o.Counts.Treated},
		BinSumW:  [2][]float64{floats(o.Weighted.Control), floats(o.Weighted.Treated)},
		Top:      [2][]float64{top(o.LargestWeights.Control), top(o.LargestWeights.Treated)},
		ESS:      [2]float64{f64(r.ESS.Control), f64(r.ESS.Treated)},
		N:        n,
		TopShare: [2]float64{f64(o.LargestWeightsShare.Control), f64(o.LargestWeightsShare.Treated)},
	}
	for a := 0; a < 2; a++ {
		f.weights.Mean[a] = math.NaN()
		if n[a] > 0 {
			f.weights.Mean[a] = sw[a] / float64(n[a])
		}
	}
	if r.Policy.TruncateQ > 0 {
		f.weights.Cap = r.Policy.Cap
	}

	for _, t := range r.Drift.Terms {
		f.drift = append(f.drift, driftTerm{Term: t.Term, ShiftSD: f64(t.ShiftSD)})
	}
	sort.SliceStable(f.drift, func(i, j int) bool {
		return worse(math.Abs(f.drift[i].ShiftSD), math.Abs(f.drift[j].ShiftSD))
	})
	return f
}

func floats(v []aggregate.Float) []float64 {
	out := make([]float64, len(v))
	for i, x := range v {
		out[i] = float64(x)
	}
	return out
}

// worse orders figures descending with NaN first.
func worse(a, b float64) bool {
	if math.IsNaN(a) {
		return !math.IsNaN(b)
	}
	return a > b
}

// mainEstimator is the estimator the plain-language lines and the segment
// table quote: AIPW when there is one, else Hájek, else IPW (the order the
// terminal summary uses).
func mainEstimator(byEst map[string]aggregate.EstimateReport) (string, aggregate.EstimateReport, bool) {
	for _, name := range []string{"aipw", "hajek", "ipw"} {
		if e, ok := byEst[name]; ok {
			return name, e, true
		}
	}
	return "", aggregate.EstimateReport{}, false
}

func estimatorOrder(byEst map[string]aggregate.EstimateReport) []string {
	rank := map[string]int{"ipw": 0, "hajek": 1, "aipw": 2}
	k := make([]string, 0, len(byEst))
	for name := range byEst {
		k = append(k, name)
	}
	sort.Slice(k, func(i, j int) bool {
		ri, iok := rank[k[i]]
		rj, jok := rank[k[j]]
		if iok != jok {
			return iok
		}
		if iok {
			return ri < rj
		}
		return k[i] < k[j]
	})
	return k
}

// newView formats r for the page.
func newView(r *aggregate.Report, f figures, opt Options) *view {
	v := &view{Title: opt.Title, HeftVersion: opt.HeftVersion, Checksum: r.ModelChecksum, Caution: r.Caution, Charts: map[string]string{}}
	v.OverlapBins = max(len(r.Overlap.Edges)-1, 0)
	if v.Caution == "" {
		v.Caution = aggregate.Caution
	}

	// Header.
	inputs := "–"
	if len(r.Inputs) > 0 {
		inputs = strings.Join(r.Inputs, ", ")
	}
	rows := fmt.Sprintf("%s (treated %s, control %s", groupInt(r.Rows), groupInt(r.Treated), groupInt(r.Control))
	if r.NullTreatment > 0 {
		rows += fmt.Sprintf(", null treatment %s", groupInt(r.NullTreatment))
	}
	if r.NullOutcome > 0 {
		rows += fmt.Sprintf(", null outcome %s", groupInt(r.NullOutcome))
	}
	rows += ")"
	fitDate := r.ModelCreated
	if fitDate == "" {
		fitDate = "not recorded"
	}
	terms := make([]string, len(r.Balance))
	for i, b := range r.Balance {
		terms[i] = b.Term
	}
	v.Terms = strings.Join(terms, ", ")
	run := "not recorded"
	if r.RunSeconds > 0 {
		run = strconv.FormatFloat(r.RunSeconds, 'f', 1, 64) + " s"
	}
	v.Header = []kv{
		{"Inputs", inputs},
		{"Rows", rows},
		{"Run time", run},
		{"Model", "checksum " + r.ModelChecksum},
		{"Fit date", fitDate},
		{"Terms", fmt.Sprintf("%d: %s", len(terms), v.Terms)},
		{"Estimand", strings.ToUpper(r.Estimand) + " — the weights target " + estimandWhom(r.Estimand, opt.PopulationLabel)},
		{"Weight policy", policyText(r.Policy)},
		{"heft version", opt.HeftVersion},
	}

	// Gate and warnings.
	switch {
	case !r.Gate.Checked:
		v.Gate = gateView{Status: "No gate was set for this run (--max-smd, --min-ess-share, --max-psi).", Class: "gate-none"}
	case r.Gate.Passed:
		v.Gate = gateView{Status: "Gate passed (required: " + gateThresholds(r.Gate.Thresholds) + ").", Class: "gate-pass"}
	default:
		v.Gate = gateView{Status: "Gate FAILED (required: " + gateThresholds(r.Gate.Thresholds) + "):", Class: "gate-fail"}
		for _, g := range r.Gate.Failures {
			v.Gate.Failures = append(v.Gate.Failures, g.Message)
		}
	}
	for _, w := range r.Warnings {
		// Gate failures are listed in the gate box already.
		if r.Gate.Checked && !r.Gate.Passed && strings.HasPrefix(w, "Gate failed: ") {
			continue
		}
		v.Warnings = append(v.Warnings, w)
	}

	// Effects.
	pop := opt.PopulationLabel
	for _, est := range score.Estimands {
		byEst, ok := r.Estimates[est]
		if !ok || len(byEst) == 0 {
			continue
		}
		for _, name := range estimatorOrder(byEst) {
			e := byEst[name]
			row := effectRow{
				Estimand: strings.ToUpper(est), EstimandKey: est, EstimandName: estimandText[est].Name, Estimator: estimatorLabel(name), EstimatorKey: name,
				Estimate: num(f64(e.Estimate)), SE: num(f64(e.SE)), SEModel: num(f64(e.SEWithModelUncertainty)),
				CILow: num(f64(e.CILow)), CIHigh: num(f64(e.CIHigh)),
			}
			if est == r.Estimand {
				row.Run, row.RowCls = "run's estimand", "run"
			}
			v.Effects = append(v.Effects, row)
		}
		if name, e, ok := mainEstimator(byEst); ok {
			v.Sentences = append(v.Sentences, sentence(est, name, e, opt, pop))
		}
	}
	v.NoEffects = len(v.Effects) == 0

	// Balance.
	v.SMDThreshold = strconv.FormatFloat(f.threshold, 'g', -1, 64)
	byTerm := map[string]aggregate.BalanceRow{}
	for _, b := range r.Balance {
		byTerm[b.Term] = b
	}
	for _, b := range f.balance {
		src := byTerm[b.Term]
		bv := balanceView{
			Term: b.Term, MeanTW: num(f64(src.MeanTreatedWeighted)), MeanCW: num(f64(src.MeanControlWeighted)),
			SMDU: fixed3(f64(src.SMDUnweighted)), SMDW: fixed3(f64(src.SMDWeighted)),
			VarRatio: fixed3(b.VarRatio), KS: fixed3(b.KS), Status: "within target", Class: "ok",
		}
		if b.Fails {
			v.BalanceFails++
			bv.Status, bv.Class = "above "+v.SMDThreshold, "fail"
			if !finite(b.Weighted) {
				bv.Status = "not computable"
			}
		}
		v.Balance = append(v.Balance, bv)
	}
	v.BalanceShown = min(len(f.balance), maxBalanceChartRows)

	// Overlap.
	o := &r.Overlap
	v.OverlapArms = []overlapArm{
		{"treated", groupInt(r.Treated), groupInt(o.BelowLow.Treated), pct(f64(o.ShareBelowLow.Treated)), groupInt(o.AboveHigh.Treated), pct(f64(o.ShareAboveHigh.Treated))},
		{"control", groupInt(r.Control), groupInt(o.BelowLow.Control), pct(f64(o.ShareBelowLow.Control)), groupInt(o.AboveHigh.Control), pct(f64(o.ShareAboveHigh.Control))},
	}
	v.OverlapTotals = []kv{
		{"Clipped (e bounded to [ε, 1−ε])", groupInt(o.Clipped)},
		{"Trimmed (weight 0 outside [α, 1−α])", groupInt(o.Trimmed)},
		{"Truncated (weight capped)", groupInt(o.Truncated)},
		{"Without a finite weight", groupInt(o.WithoutWeight)},
	}

	// Weights.
	largest := func(l []aggregate.WeightShare) string {
		if len(l) == 0 {
			return "–"
		}
		return num(f64(l[0].Weight))
	}
	wf := f.weights
	v.WeightArms = []weightArm{
		{"treated", groupInt(r.Treated), num(f64(r.SumWeights.Treated)), num(wf.Mean[1]), groupFloat(wf.ESS[1]), pct(f64(r.ESSShare.Treated)), largest(o.LargestWeights.Treated), pct(wf.TopShare[1])},
		{"control", groupInt(r.Control), num(f64(r.SumWeights.Control)), num(wf.Mean[0]), groupFloat(wf.ESS[0]), pct(f64(r.ESSShare.Control)), largest(o.LargestWeights.Control), pct(wf.TopShare[0])},
	}

	// Drift.
	psi := f64(r.Drift.PSI)
	v.PSI = fixed3(psi)
	switch {
	case !finite(psi):
		v.PSINote = "not computable (the model has no propensity deciles, or no rows were scored)"
	case psi > psiAlarm:
		v.PSINote = fmt.Sprintf("a large shift (above %g): the scored table no longer looks like the fit sample; consider refitting", psiAlarm)
	case psi > psiWatch:
		v.PSINote = fmt.Sprintf("a moderate shift (between %g and %g)", psiWatch, psiAlarm)
	default:
		v.PSINote = fmt.Sprintf("a small shift (at most %g)", psiWatch)
	}
	byDrift := map[string]aggregate.TermShift{}
	for _, t := range r.Drift.Terms {
		byDrift[t.Term] = t
	}
	for _, t := range f.drift {
		src := byDrift[t.Term]
		v.DriftTerms = append(v.DriftTerms, driftView{Term: t.Term, MeanFit: num(src.MeanFit), Mean: num(f64(src.Mean)), Shift: signed3(t.ShiftSD)})
	}
	v.DriftShown = min(len(f.drift), maxDriftChartRows)
	v.Unseen = countList(r.Drift.Unseen)
	v.Missing = countList(r.Drift.Missing)

	// Segments.
	if len(r.Segments) > 0 {
		v.SegmentBy = r.By
		if len(v.SegmentBy) == 0 { // a report without "by": take the keys
			for k := range r.Segments[0].By {
				v.SegmentBy = append(v.SegmentBy, k)
			}
			slices.Sort(v.SegmentBy)
		}
		v.SegmentsMain = strings.ToUpper(r.Estimand)
		for _, g := range r.Segments {
			sv := segmentView{
				Rows: groupInt(g.Rows), Treated: groupInt(g.Treated), Control: groupInt(g.Control),
				ESST: groupFloat(f64(g.ESS.Treated)), ESSC: groupFloat(f64(g.ESS.Control)), MaxSMD: fixed3(f64(g.MaxAbsSMDWeighted)),
				Suppressed: g.Suppressed, Estimate: "–",
			}
			for _, c := range v.SegmentBy {
				sv.Values = append(sv.Values, g.By[c])
			}
			if g.Suppressed {
				sv.Estimate = "suppressed (too few rows in an arm)"
			} else if name, e, ok := mainEstimator(g.Estimates[r.Estimand]); ok {
				sv.Estimate = num(f64(e.Estimate)) + " (" + estimatorLabel(name) + ")"
				sv.CI = num(f64(e.CILow)) + " to " + num(f64(e.CIHigh))
			}
			v.Segments = append(v.Segments, sv)
		}
	}
	return v
}

func estimatorLabel(name string) string {
	if l, ok := estimatorName[name]; ok {
		return l
	}
	return name
}

func estimandWhom(est, pop string) string {
	t, ok := estimandText[est]
	if !ok {
		return pop
	}
	return fmt.Sprintf(t.Whom, pop)
}

// sentence says in words what one estimand's main estimate means.
func sentence(est, estimator string, e aggregate.EstimateReport, opt Options, pop string) string {
	t, ok := estimandText[est]
	whom := fmt.Sprintf("For estimand %s", est)
	if ok {
		whom = "Among " + fmt.Sprintf(t.Whom, pop)
	}
	x, lo, hi := f64(e.Estimate), f64(e.CILow), f64(e.CIHigh)
	if !finite(x) {
		return fmt.Sprintf("%s, the effect of %s on %s could not be estimated (an arm without rows or weight).", whom, opt.TreatmentLabel, opt.OutcomeLabel)
	}
	unit := ""
	if opt.Unit != "" {
		unit = " " + opt.Unit
	}
	verb := "changed"
	if est == score.ATC {
		verb = "would have changed"
	}
	s := fmt.Sprintf("%s, %s %s %s by %s%s on average", whom, opt.TreatmentLabel, verb, opt.OutcomeLabel, num(x), unit)
	if finite(lo) && finite(hi) {
		s += fmt.Sprintf(" (95%% CI %s to %s%s; %s)", num(lo), num(hi), unit, estimatorLabel(estimator))
		if lo <= 0 && hi >= 0 {
			s += ". The interval includes no change."
		} else {
			s += "."
		}
	} else {
		s += fmt.Sprintf(" (%s; no confidence interval).", estimatorLabel(estimator))
	}
	return s
}

func policyText(p score.Policy) string {
	var parts []string
	parts = append(parts, strings.ToUpper(p.Estimand)+" weights")
	if p.Stabilize {
		parts = append(parts, "stabilized")
	} else {
		parts = append(parts, "not stabilized")
	}
	if p.Clip > 0 {
		parts = append(parts, fmt.Sprintf("propensity clipped to [%g, %g]", p.Clip, 1-p.Clip))
	}
	if p.Trim > 0 {
		parts = append(parts, fmt.Sprintf("trimmed outside [%g, %g]", p.Trim, 1-p.Trim))
	}
	if p.TruncateQ > 0 {
		parts = append(parts, fmt.Sprintf("truncated at the fit sample's %g quantile (cap %s)", p.TruncateQ, num(p.Cap)))
	}
	if p.Clip == 0 && p.Trim == 0 && p.TruncateQ == 0 {
		parts = append(parts, "no clipping, trimming or truncation")
	}
	return strings.Join(parts, "; ")
}

func gateThresholds(g aggregate.Gate) string {
	var parts []string
	if g.MaxSMD > 0 {
		parts = append(parts, fmt.Sprintf("weighted |SMD| ≤ %g", g.MaxSMD))
	}
	if g.MinESSShare > 0 {
		parts = append(parts, fmt.Sprintf("ESS share ≥ %g in each arm", g.MinESSShare))
	}
	if g.MaxPSI > 0 {
		parts = append(parts, fmt.Sprintf("propensity PSI ≤ %g", g.MaxPSI))
	}
	return strings.Join(parts, "; ")
}

func countList(m map[string]int64) []kv {
	var out []kv
	for _, k := range slices.Sorted(maps.Keys(m)) {
		if m[k] > 0 {
			out = append(out, kv{k, groupInt(m[k])})
		}
	}
	return out
}

// num formats a figure with four significant digits, without an exponent
// for ordinary magnitudes, with a true minus sign; "–" when undefined.
func num(v float64) string {
	if !finite(v) {
		return "–"
	}
	var s string
	a := math.Abs(v)
	switch {
	case a == 0:
		s = "0"
	case a >= 1e-4 && a < 1e9:
		dec := 3 - int(math.Floor(math.Log10(a)))
		s = strconv.FormatFloat(v, 'f', max(dec, 0), 64)
	default:
		s = strconv.FormatFloat(v, 'g', 4, 64)
	}
	if v < 0 {
		s = s[1:]
	}
	if a >= 1e4 && a < 1e9 { // group the thousands of large figures
		s = groupDigits(s)
	}
	if v < 0 {
		s = "−" + s
	}
	return s
}

// groupDigits puts commas between the thousands of s's integer part.
func groupDigits(s string) string {
	intPart, frac, _ := strings.Cut(s, ".")
	var b strings.Builder
	for i := range len(intPart) {
		if i > 0 && (len(intPart)-i)%3 == 0 {
			b.WriteByte(',')
		}
		b.WriteByte(intPart[i])
	}
	if frac != "" {
		b.WriteString("." + frac)
	}
	return b.String()
}

// fixed3 formats with three decimals, for SMDs, ratios and distances.
func fixed3(v float64) string {
	switch {
	case math.IsNaN(v):
		return "–"
	case math.IsInf(v, 1):
		return "∞"
	case math.IsInf(v, -1):
		return "−∞"
	}
	s := strconv.FormatFloat(v, 'f', 3, 64)
	if s == "-0.000" {
		s = "0.000"
	}
	return strings.Replace(s, "-", "−", 1)
}

func signed3(v float64) string {
	if !finite(v) {
		return fixed3(v)
	}
	if v >= 0 {
		return "+" + fixed3(v)
	}
	return fixed3(v)
}
