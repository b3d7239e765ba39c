package fit

// FormatName and FormatVersion identify heft's model file format. A loader
// refuses a file whose format_version is newer than FormatVersion.
const (
	FormatName    = "heft-model"
	FormatVersion = 1
)

// Model is everything the score stage needs, as stored in the model file
// (JSON, human-readable and diffable). Checksum is "sha256:" and the hex
// SHA-256 of the canonical JSON of the model with Checksum set to "".
type Model struct {
	Format        string         `json:"format"`
	FormatVersion int            `json:"format_version"`
	HeftVersion   string         `json:"heft_version"`
	Created       string         `json:"created"` // RFC 3339, UTC: the fit date
	Inputs        []string       `json:"inputs"`
	Schema        []Field        `json:"schema"` // the input schema at fit, all columns
	Encoding      Encoding       `json:"encoding"`
	Propensity    GLM            `json:"propensity"`
	Outcome       *OutcomeModels `json:"outcome,omitempty"`
	Diagnostics   Diagnostics    `json:"diagnostics"`
	Reference     Reference      `json:"reference"`
	Checksum      string         `json:"checksum"`
}

// Field is one column of the input schema.
type Field struct {
	Name     string `json:"name"`
	Type     string `json:"type"`
	Nullable bool   `json:"nullable"`
}

// OutcomeModels are the per-arm outcome regressions, over the same terms as
// the propensity model.
type OutcomeModels struct {
	Kind    string `json:"kind"` // "continuous" (gaussian) or "binary" (binomial)
	Treated GLM    `json:"treated"`
	Control GLM    `json:"control"`
}

// Quantile is one point of an empirical quantile function.
type Quantile struct {
	Q     float64 `json:"q"`
	Value float64 `json:"value"`
}

// Diagnostics describe the fit.
type Diagnostics struct {
	RowsRead   int64  `json:"rows_read"`   // rows seen in the inputs
	SampleRows int    `json:"sample_rows"` // rows fitted
	Sampled    bool   `json:"sampled"`     // reservoir-sampled (else every row)
	Seed       uint64 `json:"seed,omitempty"`
	NTreated   int    `json:"n_treated"`
	NControl   int    `json:"n_control"`
	// AUC is the c-statistic of the propensity model on the fit sample.
	AUC float64 `json:"auc"`
	// PropensityQuantiles per arm at q = 0, .01, .05, .25, .5, .75, .95, .99, 1.
	PropensityQuantiles ArmQuantiles   `json:"propensity_quantiles"`
	ShareBelow001       float64        `json:"share_e_below_0_01"`
	ShareAbove099       float64        `json:"share_e_above_0_99"`
	MissingCounts       map[string]int `json:"missing_counts,omitempty"` // nulls/NaN per column in the sample
}

// ArmQuantiles holds one quantile function per treatment arm.
type ArmQuantiles struct {
	Treated []Quantile `json:"treated"`
	Control []Quantile `json:"control"`
}

// Reference is what later stages compare against, computed once on the fit
// sample so that no stage needs a second look at it.
type Reference struct {
	// ShareTreated is the fit sample's marginal share of treated rows, the
	// numerator of stabilized weights (Robins, Hernán & Brumback 2000).
	ShareTreated float64 `json:"share_treated"`
	// Terms has one entry per term except the intercept, in term order.
	Terms []TermReference `json:"terms"`
	// PropensityEdges are fixed equal-width bin edges on [0, 1] (51 edges,
	// 50 bins) for overlap histograms; PropensityCounts is the fit sample's
	// histogram on them (all rows), the expected distribution for drift (PSI).
	PropensityEdges  []float64 `json:"propensity_edges"`
	PropensityCounts []float64 `json:"propensity_counts"`
	// PropensityDeciles are the distinct interior deciles of the fit
	// sample's propensities and DecileCounts the sample's counts in the bins
	// they make: the expected distribution for the population stability index.
	PropensityDeciles []float64 `json:"propensity_deciles"`
	DecileCounts      []float64 `json:"propensity_decile_counts"`
	// WeightQuantiles maps "ate", "att", "atc", "overlap" and the same with
	// "/stabilized" to the fit sample's weight quantiles (unclipped
	// propensities) on a grid of q, for --truncate-quantile: the cap is
	// interpolated linearly in q and is the same for every partition.
	WeightQuantiles map[string][]Quantile `json:"weight_quantiles"`
}

// TermReference summarizes one term on the fit sample.
type TermReference struct {
	Term string `json:"term"`
	// Edges are the distinct interior decile edges (at most 9), used as bin
	// edges for the weighted Kolmogorov–Smirnov distance and drift.
	Edges       []float64 `json:"edges"`
	Mean        float64   `json:"mean"`
	SD          float64   `json:"sd"`
	MeanTreated float64   `json:"mean_treated"`
	SDTreated   float64   `json:"sd_treated"`
	MeanControl float64   `json:"mean_control"`
	SDControl   float64   `json:"sd_control"`
}
