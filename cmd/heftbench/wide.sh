#!/usr/bin/env bash
# Wide-table score benchmark: does heft score's splice path (decode only
# the model's columns, copy every input column chunk as bytes, encode only
# the appended columns) cost about what decoding the model's columns and
# copying the file cost, and far less than re-encoding every column?
# Side by side in one run, whole-process wall time and peak RSS from GNU
# time, alternating runs, on an invented 101-column customer-month table
# (heftbench widegen: 20 model columns, the treatment, 80 others):
#   cp            plain copy of the file (the byte-copy floor)
#   decode        heftbench decode of the 21 columns the model reads
#   decode + cp   both, one after the other (the splice floor)
#   splice        heft score (the default for Parquet to Parquet)
#   reencode      heft score --reencode (decode and re-encode all 101)
# then checks that both heft outputs hold the same rows and prints the
# ratios.
#
#   bash cmd/heftbench/wide.sh [ROWS] [RUNS]
set -euo pipefail
cd "$(dirname "$0")/../.."
rows=${1:-2000000}
runs=${2:-5}
dir=.bench/wide
mkdir -p "$dir/t$rows"
go build -o .bench/heft ./cmd/heft
go build -o .bench/heftbench ./cmd/heftbench
H=.bench/heft
B=.bench/heftbench
covs=region,tariff,dwelling_type,heating_fuel,floor_area_m2,occupants,home_age_years,prior_kwh_m1,prior_kwh_m2,prior_kwh_m3,peak_share,avg_temp_c,bill_prev,tenure_years,solar_kw,income_index,appliance_index,outages_12m,service_calls_12m,autopay_months
treat=thermostat_offer
in=$dir/t$rows/wide.parquet
[ -f "$in" ] || $B widegen -out "$in" -rows "$rows"
echo "input: $in, $rows rows, $(stat -c %s "$in") bytes"
$H fit -q -o "$dir/model.json" --treatment $treat --covariates $covs --sample-rows 200000 "$in"

res=$dir/sidebyside.txt
/usr/bin/python3 cmd/heftbench/sidebyside.py -n "$runs" \
  --name "cp" -- "cp $in $dir/cp.parquet" \
  --name "decode 21 columns" -- "$B decode -in $in -columns $covs,$treat" \
  --name "decode + cp" -- "$B decode -in $in -columns $covs,$treat && cp $in $dir/cp.parquet" \
  --name "heft score (splice)" -- "$H score -q --model $dir/model.json -o $dir/splice.parquet $in" \
  --name "heft score --reencode" -- "$H score -q --reencode --model $dir/model.json -o $dir/reencode.parquet $in" \
  | tee "$res"

echo
$B cmp -a "$dir/splice.parquet" -b "$dir/reencode.parquet"
echo "output bytes: splice $(stat -c %s "$dir/splice.parquet"), reencode $(stat -c %s "$dir/reencode.parquet")"
# Ratios of medians from the table above (each row's last field is its
# run-by-run median ratio to cp; the ratio of two rows' medians is close).
awk '
  /^decode \+ cp /        { dc = $(NF-4); dcr = $NF; dcm = $(NF-1) }
  /^heft score \(splice\)/ { sp = $(NF-4); spr = $NF; spm = $(NF-1) }
  /^heft score --reencode/ { re = $(NF-4); rer = $NF; rem = $(NF-1) }
  END {
    printf "reencode / splice (median wall): %.2fx (target: splice at least 3x faster)\n", re / sp
    printf "splice / (decode + cp) (median wall): %.2fx (target: at most 2x)\n", sp / dc
    printf "peak RSS MiB: decode + cp %s, splice %s, reencode %s\n", dcm, spm, rem
  }' "$res"
