#!/usr/bin/env bash
# Beam module benchmark (issue "Beyond one machine"): what the module costs
# to build and ship, and the Prism runner against heft score on the same
# data, side by side in one run (whole-process wall time and peak RSS from
# GNU time, alternating runs):
#   heft score        heft score -o DIR/ --report (one process, 2 scoring workers)
#   beam, 1 part      heft-beam on Prism, the file as one part
#   beam, N parts     heft-beam on Prism, --part-rows 262144 (ranges of row groups)
#
#   bash cmd/heftbench/beam.sh [ROWS] [RUNS]
set -euo pipefail
cd "$(dirname "$0")/../.."
rows=${1:-2000000}
runs=${2:-5}
dir=.bench/beam
mkdir -p "$dir"

echo "== build (cold: an empty build cache; warm: after touching one file)"
cold() { # cold LABEL MODULE_DIR PKG OUT
  local cache; cache=$(mktemp -d)
  /usr/bin/time -f "  $1 cold build: %e s wall, %U s user" env GOCACHE="$cache" go build -C "$2" -o "$PWD/$4" "$3"
  rm -rf "$cache"
}
cold "heft" . ./cmd/heft .bench/heft
cold "heft-beam" pipeline/beam ./cmd/heft-beam .bench/heft-beam
touch pipeline/beam/stage/graph.go
/usr/bin/time -f "  heft-beam warm build: %e s wall" go build -C pipeline/beam -o "$PWD/.bench/heft-beam" ./cmd/heft-beam
go build -C pipeline/beam -ldflags "-s -w" -o "$PWD/.bench/heft-beam-stripped" ./cmd/heft-beam
go build -ldflags "-s -w" -o .bench/heft-stripped ./cmd/heft

echo "== size and dependencies"
for b in heft heft-beam; do
  printf "  %-10s %4d MB (%d MB stripped), %d modules linked\n" "$b" \
    $(( $(stat -c %s .bench/$b) / 1000000 )) $(( $(stat -c %s .bench/$b-stripped) / 1000000 )) \
    "$(go version -m .bench/$b | grep -c $'^\tdep')"
done
printf "  packages outside the standard library: heft %d, heft-beam %d\n" \
  "$(go list -deps -f '{{if not .Standard}}{{.ImportPath}}{{end}}' ./cmd/heft | grep -c .)" \
  "$(go list -C pipeline/beam -deps -f '{{if not .Standard}}{{.ImportPath}}{{end}}' ./cmd/heft-beam | grep -c .)"
printf "  modules in the build list: heft %d, heft-beam %d\n" \
  "$(go list -m all | wc -l)" "$(go list -C pipeline/beam -m all | wc -l)"

echo "== Prism against heft score, $rows rows"
H=.bench/heft
B=.bench/heft-beam
covs=dwelling_age,floor_area,occupants,prior_gas_kwh,heating,district,flex_tariff
[ -f "$dir/t$rows/demo.parquet" ] || $H demo -q --data-only --rows "$rows" --dir "$dir/t$rows"
in=$dir/t$rows/demo.parquet
$H fit -q -o "$dir/model.json" --treatment audit --covariates $covs --outcome next_gas_kwh --sample-rows 200000 "$in"
/usr/bin/python3 cmd/heftbench/sidebyside.py -n "$runs" --rows "$rows" \
  --name "heft score" -- "$H score -q --model $dir/model.json -o $dir/cli/ --report $dir/cli.json $in" \
  --name "beam, 1 part" -- "$B -q --model $dir/model.json -o $dir/one/ --report $dir/one.json $in" \
  --name "beam, 262144-row parts" -- "$B -q --model $dir/model.json -o $dir/parts/ --part-rows 262144 --report $dir/parts.json $in"
echo "  parts written: $(ls $dir/parts | grep -c parquet)"
cmp "$dir/cli/demo.parquet" "$dir/one/demo.parquet" && echo "  one part: the table is byte-identical to heft score's"
