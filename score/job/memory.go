package job

// memoryLimit is the Go heap's soft limit during scoring unless GOMEMLIMIT
// says otherwise: memory is bounded by batch size × queue depth by design,
// and the limit keeps the collector from letting garbage grow past that.
// A batch holds every column read, so a wide table re-encoded needs more:
// the limit is memoryLimitPerColumn per column read when that is larger.
// A limit below the live batches would make the collector run back to back
// (a 101-column table re-encoded took 18.6 s at 384 MiB, 9.5 s at 1 GiB).
const (
	MemoryLimit          = 384 << 20
	memoryLimitPerColumn = 10 << 20
)

// cellBudget is the default batch size in cells, rows × columns read: a
// batch of 65,536 rows of 16 columns. A wider read gets fewer rows per
// batch (never fewer than minBatchRows), so memory stays bounded by the
// cells in flight whatever the width: a 101-column table re-encoded peaked
// at 1.0 GiB with 65,536-row batches and at 0.56 GiB with 10,000.
const (
	cellBudget   = 65536 * 16
	minBatchRows = 8192
)

// BatchRowsFor is the default rows per batch for a read of columns
// columns, at most flag, a multiple of 1024 (the encoders' own batch).
func BatchRowsFor(columns, flag int) int {
	if columns <= 16 {
		return flag
	}
	return min(flag, max(minBatchRows, cellBudget/columns/1024*1024))
}

// MemoryLimitFor is the soft limit for a read of columns columns.
func MemoryLimitFor(columns int) int64 {
	return max(MemoryLimit, int64(columns)*memoryLimitPerColumn)
}
