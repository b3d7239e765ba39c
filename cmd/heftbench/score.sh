#!/usr/bin/env bash
# Score benchmark (issues "Streaming score stage" and "Mergeable
# accumulators"), side by side in one run, whole-process wall time and peak
# RSS from GNU time, alternating runs:
#   floor    plain read + write of the same file with the same Parquet library
#   heft     heft score (ATE weights, snappy Parquet out; copies the column
#            chunks the model does not read)
#   heft re  heft score --reencode (decodes and re-encodes every column)
#   heft+acc heft score with --state and --report (the accumulators)
#   duckdb   the peer: DuckDB COPY with heft's coefficients, 2 threads
# then peak RSS of heft score at 1M and 10M rows.
#
#   bash cmd/heftbench/score.sh [ROWS] [RUNS]
set -euo pipefail
cd "$(dirname "$0")/../.."
rows=${1:-2000000}
runs=${2:-5}
dir=.bench/score
mkdir -p "$dir"
go build -o .bench/heft ./cmd/heft
go build -o .bench/heftbench ./cmd/heftbench
if [ -d ../shared/peer/duckdb ]; then
  go build -C ../shared/peer/duckdb -o "$PWD/.bench/duckpeer" .
fi
H=.bench/heft
covs=dwelling_age,floor_area,occupants,prior_gas_kwh,heating,district,flex_tariff
[ -f "$dir/t$rows/demo.parquet" ] || $H demo -q --data-only --rows "$rows" --dir "$dir/t$rows"
in=$dir/t$rows/demo.parquet
$H fit -q -o "$dir/model.json" --treatment audit --covariates $covs --outcome next_gas_kwh --sample-rows 200000 "$in"
$H inspect --json "$dir/model.json" > "$dir/coef.json"
args=(--name "floor: plain copy" -- ".bench/heftbench copy -in $in -out $dir/floor.parquet"
      --name "heft score" -- "$H score -q --model $dir/model.json -o $dir/heft.parquet $in"
      --name "heft score --reencode" -- "$H score -q --reencode --model $dir/model.json -o $dir/heftre.parquet $in"
      --name "heft score --state" -- "$H score -q --model $dir/model.json -o $dir/heftacc.parquet --state $dir/state.json --report $dir/report.json $in")
if [ -x .bench/duckpeer ]; then
  args+=(--name "duckdb COPY, 2 threads" -- ".bench/duckpeer -mode copy -coef $dir/coef.json -treatment audit -estimand ate -threads 2 -in $in -out $dir/peer.parquet")
fi
/usr/bin/python3 cmd/heftbench/sidebyside.py -n "$runs" --rows "$rows" "${args[@]}"

echo
echo "peak RSS of heft score by table size (median of 5 runs; one run's peak varies by several MiB):"
# medianrss LABEL CMD...: runs CMD 5 times under GNU time, prints the medians.
medianrss() {
  local label=$1; shift
  local f; f=$(mktemp)
  for _ in 1 2 3 4 5; do /usr/bin/time -a -o "$f" -f "%e %M" "$@" >/dev/null; done
  sort -k2 -n "$f" | awk -v l="$label" 'NR==3 {printf "  %s: %d KiB peak RSS, the median of 5 (that run %.2f s)\n", l, $2, $1}'
  rm -f "$f"
}
for n in 1000000 10000000; do
  [ -f "$dir/t$n/demo.parquet" ] || $H demo -q --data-only --rows "$n" --dir "$dir/t$n"
  medianrss "$n rows" $H score -q --model "$dir/model.json" -o "$dir/rss.parquet" "$dir/t$n/demo.parquet"
  medianrss "$n rows with --state" $H score -q --model "$dir/model.json" --report-only --state "$dir/state$n.json" "$dir/t$n/demo.parquet"
  echo "  state file at $n rows: $(stat -c %s "$dir/state$n.json") bytes"
done
