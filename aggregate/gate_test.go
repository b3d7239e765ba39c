package aggregate

import (
	"math"
	"strings"
	"testing"
)

func TestGate(t *testing.T) {
	bal := []BalanceRow{
		{Term: "age", SMDWeighted: 0.02},
		{Term: "income", SMDWeighted: -0.15},
		{Term: "region=north", SMDWeighted: Float(math.Inf(1))},
	}
	n := [2]int64{1000, 500}
	ess := Arms{Treated: 400, Control: 50}
	for _, c := range []struct {
		name   string
		gate   Gate
		psi    float64
		checks []string
		terms  []string
	}{
		{"none", Gate{}, 0.5, nil, nil},
		{"smd", Gate{MaxSMD: 0.1}, 0, []string{"max_smd"}, []string{"income", "region=north"}},
		{"smd loose", Gate{MaxSMD: 1e9}, 0, []string{"max_smd"}, []string{"region=north"}},
		{"ess", Gate{MinESSShare: 0.1}, 0, []string{"min_ess_share"}, nil},
		{"ess both", Gate{MinESSShare: 0.9}, 0, []string{"min_ess_share", "min_ess_share"}, nil},
		{"psi pass", Gate{MaxPSI: 0.25}, 0.2, nil, nil},
		{"psi fail", Gate{MaxPSI: 0.25}, 0.3, []string{"max_psi"}, nil},
		{"psi undefined", Gate{MaxPSI: 0.25}, math.NaN(), []string{"max_psi"}, nil},
	} {
		r := c.gate.evaluate(bal, n, ess, Float(c.psi))
		if r.Checked != (c.gate != Gate{}) || r.Passed != (len(c.checks) == 0) || len(r.Failures) != len(c.checks) {
			t.Errorf("%s: %+v", c.name, r)
			continue
		}
		for i, f := range r.Failures {
			if f.Check != c.checks[i] || f.Message == "" {
				t.Errorf("%s: failure %d is %+v, want %s", c.name, i, f, c.checks[i])
			}
		}
		if c.terms != nil && strings.Join(r.Failures[0].Terms, ",") != strings.Join(c.terms, ",") {
			t.Errorf("%s: terms %v, want %v", c.name, r.Failures[0].Terms, c.terms)
		}
	}
	r := Gate{MinESSShare: 0.2}.evaluate(bal, n, ess, 0)
	if f := r.Failures[0]; f.Arm != "control" || float64(f.Value) != 0.05 {
		t.Errorf("ESS failure %+v, want the control arm at share 0.05", f)
	}
}
