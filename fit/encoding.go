package fit

// Kinds of covariate.
const (
	KindNumeric     = "numeric"
	KindCategorical = "categorical"
)

// Missing-value policies.
const (
	MissingError     = "error"     // a null or NaN in a covariate is an error naming column and count
	MissingIndicator = "indicator" // add a term name=(missing) and impute the fit-sample mean
)

// Unseen-level policies (score time).
const (
	UnseenError     = "error"
	UnseenReference = "reference" // encode as the reference level and count it
)

// Special level names. They are written in parentheses so they cannot clash
// with ordinary data values that a user would type.
const (
	LevelOther   = "(other)"   // levels rarer than the minimum count, pooled
	LevelMissing = "(missing)" // the missing-indicator term of a column
)

// Encoding turns input columns into model terms. It is stored in the model
// file, so fit and score encode identically.
//
// Terms, in order: "intercept", then for each covariate in Columns order:
// a numeric column's own name; for a categorical column one term
// "name=level" per non-reference level in Levels order (LevelOther last when
// pooling happened); then "name=(missing)" when MissingIndicator is set.
type Encoding struct {
	Treatment Treatment    `json:"treatment"`
	Outcome   *Outcome     `json:"outcome,omitempty"`
	Columns   []ColumnSpec `json:"columns"`
	Missing   string       `json:"missing"`         // MissingError or MissingIndicator
	MinLevel  int          `json:"min_level_count"` // levels rarer than this were pooled into LevelOther
}

// Treatment describes the binary treatment column.
type Treatment struct {
	Column string `json:"column"`
	Type   string `json:"type"` // Arrow type name at fit, e.g. "int64", "bool", "utf8"
	// TreatedValue and ControlValue are the two values as text ("1"/"0",
	// "true"/"false", or the two strings of a string column).
	TreatedValue string `json:"treated_value"`
	ControlValue string `json:"control_value"`
}

// Outcome describes the outcome column.
type Outcome struct {
	Column string `json:"column"`
	Type   string `json:"type"`
	Kind   string `json:"kind"` // "continuous" or "binary"
}

// ColumnSpec is one covariate.
type ColumnSpec struct {
	Name string `json:"name"`
	Type string `json:"type"` // Arrow type name at fit
	Kind string `json:"kind"` // KindNumeric or KindCategorical
	// Categorical only. Reference is the most frequent level at fit; Levels
	// are the remaining kept levels in term order; Pooled lists levels folded
	// into LevelOther (for the record: at score time any level not in
	// Reference, Levels or Pooled is unseen).
	Reference string   `json:"reference,omitempty"`
	Levels    []string `json:"levels,omitempty"`
	Pooled    []string `json:"pooled,omitempty"`
	// MissingIndicator adds the term name=(missing); Impute is the value
	// used for a numeric column's missing rows (the fit-sample mean).
	MissingIndicator bool    `json:"missing_indicator,omitempty"`
	Impute           float64 `json:"impute,omitempty"`
}
