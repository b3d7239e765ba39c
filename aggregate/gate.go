package aggregate

import (
	"fmt"
	"math"
	"strings"
)

// psiAlarm is the PSI above which a shift is usually called significant in
// credit-risk practice, and psiWatch the level above which it is called
// moderate (both common practice, no single published source).
const (
	psiAlarm = 0.25
	psiWatch = 0.10
)

// checked reports whether any threshold is set.
func (g Gate) checked() bool { return g.MaxSMD > 0 || g.MinESSShare > 0 || g.MaxPSI > 0 }

// GateFailure is one threshold a run did not meet.
type GateFailure struct {
	Check     string   `json:"check"` // "max_smd", "min_ess_share" or "max_psi"
	Threshold float64  `json:"threshold"`
	Value     Float    `json:"value"`           // the offending figure (the largest |SMD|, the smaller share, the PSI)
	Arm       string   `json:"arm,omitempty"`   // min_ess_share: "treated" or "control"
	Terms     []string `json:"terms,omitempty"` // max_smd: every term above the threshold
	Message   string   `json:"message"`
}

// GateResult says whether the run met its thresholds.
type GateResult struct {
	Checked    bool          `json:"checked"`
	Passed     bool          `json:"passed"`
	Thresholds Gate          `json:"thresholds"`
	Failures   []GateFailure `json:"failures"`
}

// evaluate checks a report's figures against g. A threshold whose figure
// cannot be computed (no balance, no weight in an arm, no PSI) fails:
// a gate that was asked for is never passed silently.
func (g Gate) evaluate(balance []BalanceRow, n [2]int64, ess Arms, psi Float) GateResult {
	r := GateResult{Checked: g.checked(), Passed: true, Thresholds: g, Failures: []GateFailure{}}
	if !r.Checked {
		return r
	}
	if g.MaxSMD > 0 {
		var terms []string
		worst := 0.0
		for _, b := range balance {
			v := math.Abs(float64(b.SMDWeighted))
			if v > g.MaxSMD || math.IsNaN(v) {
				terms = append(terms, b.Term)
				if !(v <= worst) {
					worst = v
				}
			}
		}
		if len(terms) > 0 {
			r.Failures = append(r.Failures, GateFailure{Check: "max_smd", Threshold: g.MaxSMD, Value: Float(worst), Terms: terms,
				Message: fmt.Sprintf("weighted |SMD| above %g (or not computable) for %d term(s): %s", g.MaxSMD, len(terms), strings.Join(terms, ", "))})
		}
	}
	if g.MinESSShare > 0 {
		for _, arm := range []struct {
			name string
			n    int64
			ess  Float
		}{{"treated", n[1], ess.Treated}, {"control", n[0], ess.Control}} {
			share := math.NaN()
			if arm.n > 0 {
				share = float64(arm.ess) / float64(arm.n)
			}
			if !(share >= g.MinESSShare) {
				r.Failures = append(r.Failures, GateFailure{Check: "min_ess_share", Threshold: g.MinESSShare, Value: Float(share), Arm: arm.name,
					Message: fmt.Sprintf("%s effective sample size is %s of %d rows (%s), below the minimum share %g", arm.name, fmtG(float64(arm.ess)), arm.n, fmtPct(share), g.MinESSShare)})
			}
		}
	}
	if g.MaxPSI > 0 {
		if v := float64(psi); !(v <= g.MaxPSI) {
			msg := fmt.Sprintf("propensity PSI against the fit sample is %.4g, above the maximum %g", v, g.MaxPSI)
			if math.IsNaN(v) {
				msg = "propensity PSI cannot be computed (the model has no propensity deciles or no rows were scored)"
			}
			r.Failures = append(r.Failures, GateFailure{Check: "max_psi", Threshold: g.MaxPSI, Value: psi, Message: msg})
		}
	}
	r.Passed = len(r.Failures) == 0
	return r
}
