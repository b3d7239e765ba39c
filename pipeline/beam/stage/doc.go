// Package stage runs heft's score stage and its accumulators on Apache
// Beam, so that a table too large for one machine is scored by the workers
// of a Flink, Spark or Dataflow job (or locally by the Prism runner) with
// the same outputs as heft score.
//
// The job's graph:
//
//	Create(parts) ─► Reshuffle ─► ParDo(score a part) ─► Combine(merge states) ─► ParDo(finish)
//
// A part is an input file, or a range of a large Parquet file's row groups
// (Plan groups consecutive row groups up to Config.PartRows rows), so one
// huge file still spreads over the workers. Each part is read and written
// by heft's own sources and sinks (score/job, the code heft score runs):
// Parquet column chunks are spliced, and every output file is committed
// atomically under a name fixed by its input file and row-group range, so
// a retried bundle rewrites the same bytes. Each part also emits the
// accumulators' state of its rows; a CombineFn whose accumulator is heft's
// aggregate.State merges them (exactly, in any order, as heft merge does),
// and the last step writes the state and the report and then the _SUCCESS
// marker, only once every part's output was committed.
//
// Workers read inputs and write outputs at the paths the launcher sees, so
// on a cluster they must be on a filesystem every worker mounts at the
// same place. The model travels inside the job (its bytes are a field of
// the scoring DoFn).
package stage
