// Package job runs heft's score stage over one part of a table: a file, or
// a range of a Parquet file's row groups, scored into one output file (or a
// stream, or nothing for a report-only run), with the accumulators' partial
// states folded as the batches go by.
//
// The heft command and the Beam workers (module pipeline/beam) both score
// through a Runner, so a table scored in one process or split across a
// cluster is written by the same code: the same columns read, the same
// splicing or re-encoding, the same sinks and the same atomic commit.
//
// A Runner is what every part of a run shares (the model, the scorer, the
// options); Open readies one part, Score streams it. Errors carry their
// kind (Error) so that commands can map them to exit codes.
package job
