package score

import (
	"encoding/json"
	"reflect"
	"testing"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/heft-project/heft/fit"
)

func TestMetadata(t *testing.T) {
	m := &fit.Model{Checksum: "sha256:ab12"}
	p := Policy{Estimand: ATT, Stabilize: true, Clip: 0.01, TruncateQ: 0.99, Cap: 12.5}
	md := Metadata(m, p, DefaultColumns(), "0.3.0")
	want := map[string]string{
		"heft.version":        "0.3.0",
		"heft.model_checksum": "sha256:ab12",
		"heft.estimand":       "att",
		"heft.policy":         `{"estimand":"att","stabilize":true,"clip":0.01,"truncate_quantile":0.99,"cap":12.5}`,
		"heft.columns":        `{"propensity":"propensity","weight":"weight","in_support":"in_support"}`,
	}
	if got := md.ToMap(); !reflect.DeepEqual(got, want) {
		t.Errorf("metadata\n%v\nwant\n%v", got, want)
	}
	var back Policy
	if err := json.Unmarshal([]byte(want["heft.policy"]), &back); err != nil || back != p {
		t.Errorf("policy does not round-trip: %+v %v", back, err)
	}
	c := DefaultColumns()
	c.Predictions = true
	if v, _ := Metadata(m, p, c, "x").GetValue("heft.columns"); v != `{"propensity":"propensity","weight":"weight","in_support":"in_support","mu0":"mu0","mu1":"mu1"}` {
		t.Errorf("columns with predictions: %s", v)
	}
}

func TestMergeMetadata(t *testing.T) {
	in := arrow.NewMetadata([]string{"zeta", "ARROW:schema", "heft.version", "alpha"}, []string{"z", "base64...", "old", "a"})
	heft := Metadata(&fit.Model{Checksum: "c"}, Policy{Estimand: ATE}, DefaultColumns(), "new")
	got := MergeMetadata(in, heft)
	keys := []string{"alpha", "heft.columns", "heft.estimand", "heft.model_checksum", "heft.policy", "heft.version", "zeta"}
	if !reflect.DeepEqual(got.Keys(), keys) {
		t.Errorf("keys %v, want %v", got.Keys(), keys)
	}
	if v, _ := got.GetValue("heft.version"); v != "new" {
		t.Errorf("heft.version %q, want heft's value", v)
	}
	if !MergeMetadata(in, heft).Equal(got) {
		t.Error("not deterministic")
	}
	if MergeMetadata(arrow.Metadata{}, arrow.Metadata{}).Len() != 0 {
		t.Error("empty inputs")
	}
}
