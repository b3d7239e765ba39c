package score

import (
	"encoding/json"
	"sort"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/heft-project/heft/fit"
)

// Metadata keys heft writes into its output files.
const (
	MetaVersion       = "heft.version"
	MetaModelChecksum = "heft.model_checksum"
	MetaEstimand      = "heft.estimand"
	MetaPolicy        = "heft.policy"
	MetaColumns       = "heft.columns"
)

// Metadata returns heft's key-value metadata for an output file: the heft
// version, the model checksum, the estimand, the policy and the appended
// column names as compact JSON. It holds no wall-clock time, so scoring the
// same input with the same model writes the same bytes.
func Metadata(m *fit.Model, p Policy, c Columns, heftVersion string) arrow.Metadata {
	pol, _ := json.Marshal(p) // plain struct of strings, bools and finite floats: cannot fail
	if !c.Predictions {
		c.Mu0, c.Mu1 = "", ""
	}
	cols, _ := json.Marshal(c)
	checksum := ""
	if m != nil {
		checksum = m.Checksum
	}
	return arrow.NewMetadata(
		[]string{MetaColumns, MetaEstimand, MetaModelChecksum, MetaPolicy, MetaVersion},
		[]string{string(cols), p.Estimand, checksum, string(pol), heftVersion},
	)
}

// MergeMetadata keeps the input's key-value metadata, minus ARROW:schema
// (the serialized input schema, which no longer describes the output), and
// adds heft's, which wins on a clash. Keys are sorted, so the result is
// deterministic.
func MergeMetadata(in, heft arrow.Metadata) arrow.Metadata {
	kv := make(map[string]string, in.Len()+heft.Len())
	for i, k := range in.Keys() {
		if k == "ARROW:schema" {
			continue
		}
		kv[k] = in.Values()[i]
	}
	for i, k := range heft.Keys() {
		kv[k] = heft.Values()[i]
	}
	keys := make([]string, 0, len(kv))
	for k := range kv {
		keys = append(keys, k)
	}
	sort.Strings(keys)
	vals := make([]string, len(keys))
	for i, k := range keys {
		vals[i] = kv[k]
	}
	return arrow.NewMetadata(keys, vals)
}
