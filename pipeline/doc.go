// Package pipeline moves record batches from input files to output files in
// constant memory. It knows nothing about models or statistics: heft's other
// packages plug into it through Transform and fold.
//
// Sources (Open, and the Parquet, Arrow IPC and CSV sources behind it) hand
// out one arrow.RecordBatch at a time in file order, in the shape of
// bufio.Scanner: Next until false, then Err once. Sinks take batches in order;
// a Committer's Close is its commit point, like gzip.Writer's. File sinks
// write through an AtomicFile, a temporary file beside the target that is
// synced and renamed over it only when Close succeeds, so a failed or
// interrupted run leaves either the old output or nothing, never half a
// file. OutDir keeps one such file per input and writes the _SUCCESS marker
// only after all of them were committed.
//
// Run is the streaming engine:
//
//	source ──► bounded queue ──► N workers (Transform.Apply) ──► reorder ──► sink.Write, fold
//	(1 goroutine)                 (N goroutines)                (caller's goroutine)
//
// Batches carry a sequence number; the last stage holds results that arrive
// early until their predecessors are done, so the sink sees batches and fold
// sees partial results strictly in input order, and output bytes and folded
// statistics do not depend on the number of workers.
//
// Memory is bounded by QueueDepth batches: the reader takes a token before it
// asks the source for a batch and the token comes back only after that
// batch's output was written, so at most QueueDepth input batches (with
// their outputs) are alive at once, whatever the size of the table. Add to
// that what the sink buffers: the Parquet sink holds one row group
// (ParquetSinkOptions.RowGroupRows rows, encoded and compressed) and the
// AtomicFile under it at most 8 MiB of write-behind chunks.
//
// The Parquet sink encodes through arrow-go's pqarrow column writers. Each
// batch's columns are encoded into a buffered row group by up to
// ParquetSinkOptions.Workers goroutines at once, one column per goroutine,
// and the AtomicFile's write-behind goroutine does the system calls, so
// writing uses more than one core while the engine's reader decodes the
// next batches. Before a row group is closed the last page of every column
// is compressed the same way, in parallel. String columns are dictionary
// encoded through pqarrow's dictionary-array path (indices against the
// levels of the row group's first batch), which skips the per-value hash
// lookup pqarrow does for plain strings; numeric columns are dictionary
// encoded when their first batch repeats values. Nothing in the file
// depends on timing or on the worker count: no timestamps are written and
// column chunks are laid out in schema order.
//
// Errors name their place: *Error carries file, row group, row and column,
// and wraps the cause for errors.Is and errors.As.
package pipeline
