package fit

// Batch is one record batch encoded into model terms, column-major, with the
// treatment and outcome decoded. Buffers are reused across batches: a Batch
// belongs to one goroutine.
type Batch struct {
	N int // rows
	// X[j] holds term j+1 (the intercept, term 0, is implicit), length N.
	X [][]float64
	// T is 1 for treated, 0 for control, -1 where the treatment is null.
	T []int8
	// Y is the outcome (nil without an outcome column); YValid[i] is false
	// where the outcome is null or NaN.
	Y      []float64
	YValid []bool
	// Unseen counts categorical values not seen at fit, per column name
	// (only with the UnseenReference policy; otherwise they are errors).
	Unseen map[string]int64
	// MissingImputed counts rows whose value was imputed, per column name.
	MissingImputed map[string]int64
}
