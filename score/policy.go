package score

// Estimands.
const (
	ATE     = "ate"
	ATT     = "att"
	ATC     = "atc"
	Overlap = "overlap"
)

// Estimands lists every estimand in report order.
var Estimands = [...]string{ATE, ATT, ATC, Overlap}

// Policy is how propensities become weights: the estimand and the
// positivity policies. It is written into the output metadata and the report.
type Policy struct {
	Estimand  string  `json:"estimand"`
	Stabilize bool    `json:"stabilize"`                   // multiply by the row's arm share at fit (Robins, Hernán & Brumback 2000)
	Clip      float64 `json:"clip,omitempty"`              // ε: bound e to [ε, 1−ε]; 0 = none
	Trim      float64 `json:"trim,omitempty"`              // α: weight 0 where e ∉ [α, 1−α] (Crump et al. 2009); 0 = none
	TruncateQ float64 `json:"truncate_quantile,omitempty"` // q: cap weights at the fit sample's q-th weight quantile (Cole & Hernán 2008); 0 = none
	Cap       float64 `json:"cap,omitempty"`               // the cap resolved from the model for TruncateQ
}

// Scores are the per-row results of scoring one batch. Buffers are reused.
type Scores struct {
	N int
	// E is the propensity as used for the weight (after clipping).
	E []float64
	// W is the weight for the policy's estimand; WValid is false where the
	// treatment is null (the output weight is null there).
	W      []float64
	WValid []bool
	// InSupport is false where trimming zeroed the weight.
	InSupport []bool
	// Mu0 and Mu1 are the outcome models' predictions (nil without them).
	Mu0, Mu1 []float64
	// Counts for the report: Clipped and Trimmed count rows (null
	// treatment included), Truncated the in-support weights that were capped.
	Clipped, Trimmed, Truncated int64
}
