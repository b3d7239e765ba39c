#!/usr/bin/env bash
# Soak test (not in go test; see DEVELOPERS.md "Faults and fuzzing"): score
# FILES demo files of ROWS rows each into a directory with 2 workers and check
#   - resident memory stays flat across files: after a warm-up of 3 files,
#     the median RSS of the later half of the files is within 15% of the
#     earlier half's, and no file's exceeds 1.5 × the warm-up's highest (RSS
#     moves with the collector by ±20% from file to file),
#   - goroutines and open file descriptors do not grow from file to file,
#   - the report equals a run over the same rows as one file (estimates,
#     standard errors, ESS, weight sums and balance to 1e-9 relative: the
#     batches differ, so sums are added in another order).
# Figures come from HEFT_DEBUG_RESOURCES=1, which makes heft print
# /proc/self figures after each file.
#
#   bash cmd/heftbench/soak.sh [FILES] [ROWS] [DIR]     # default 50 200000 .bench/soak
set -euo pipefail
cd "$(dirname "$0")/../.."
files=${1:-50}
rows=${2:-200000}
dir=${3:-.bench/soak}
total=$((files * rows))
mkdir -p "$dir"
go build -o "$dir/heft" ./cmd/heft
H=$dir/heft
covs=dwelling_age,floor_area,occupants,prior_gas_kwh,heating,district,flex_tariff
# The generator draws rows in sequence, so the split and the single file
# hold the same rows in the same order.
[ -d "$dir/split$files-$rows" ] || $H demo -q --data-only --rows "$total" --files "$files" --dir "$dir/split$files-$rows"
[ -d "$dir/one$total" ] || $H demo -q --data-only --rows "$total" --dir "$dir/one$total"
rm -f "$dir/split$files-$rows/truth.json"
$H fit -q -o "$dir/model.json" --treatment audit --covariates $covs --outcome next_gas_kwh --sample-rows 200000 "$dir/one$total/demo.parquet"
rm -rf "$dir/out" "$dir/one.parquet"
echo "scoring $files files × $rows rows with 2 workers"
HEFT_DEBUG_RESOURCES=1 /usr/bin/time -f "wall %e s, peak RSS %M KiB" \
  $H score -q --model "$dir/model.json" --workers 2 -o "$dir/out/" --report "$dir/report_split.json" "$dir/split$files-$rows" \
  2> "$dir/resources.log"
cat "$dir/resources.log" | tail -1
$H score -q --model "$dir/model.json" --workers 2 -o "$dir/one.parquet" --report "$dir/report_one.json" "$dir/one$total/demo.parquet"

/usr/bin/python3 - "$dir" <<'EOF'
import json, math, re, sys
d = sys.argv[1]
rows = [dict(re.findall(r"(\w+)=(\S+)", l)) | {"file": l.split()[2]}
        for l in open(f"{d}/resources.log") if l.startswith("heft resources:")]
ok = True
rss = [int(r["rss_kib"]) for r in rows]
gor = [int(r["goroutines"]) for r in rows]
fds = [int(r["fds"]) for r in rows]
warm = max(rss[:3])
after = rss[3:] or rss
half = len(after) // 2 or 1
med = lambda v: sorted(v)[len(v) // 2]
early, late = med(after[:half]), med(after[half:] or after)
print(f"files {len(rows)}; RSS KiB first {rss[0]}, warm-up max {warm}, max {max(rss)}, last {rss[-1]}")
print(f"RSS median, files 4..{3 + half}: {early}; files {4 + half}..{len(rss)}: {late}")
print(f"goroutines {min(gor)}..{max(gor)}; fds {min(fds)}..{max(fds)}")
if late > 1.15 * early or max(after) > 1.5 * warm:
    print("FAIL: resident memory grows across files"); ok = False
if gor[-1] > gor[0] or fds[-1] > fds[0]:
    print("FAIL: goroutines or file descriptors grow"); ok = False
a, b = json.load(open(f"{d}/report_split.json")), json.load(open(f"{d}/report_one.json"))
worst = [0.0, ""]
def cmp(path, x, y):
    global ok
    if isinstance(x, dict):
        if set(x) != set(y):
            print(f"FAIL: {path}: keys differ"); ok = False; return
        for k in x: cmp(f"{path}.{k}", x[k], y[k])
    elif isinstance(x, list):
        if len(x) != len(y):
            print(f"FAIL: {path}: lengths differ"); ok = False; return
        for i, (u, v) in enumerate(zip(x, y)): cmp(f"{path}[{i}]", u, v)
    elif isinstance(x, (int, float)) and not isinstance(x, bool):
        if x == y: return
        r = abs(x - y) / max(abs(x), abs(y))
        if r > worst[0]: worst[:] = [r, path]
        if r > 1e-9:
            print(f"FAIL: {path}: {x} vs {y}"); ok = False
    elif x != y:
        print(f"FAIL: {path}: {x!r} vs {y!r}"); ok = False
for key in ["rows", "treated", "control", "estimates", "ess", "sum_weights", "balance", "overlap"]:
    cmp(key, a[key], b[key])
print(f"report vs single file: largest relative difference {worst[0]:.2e} ({worst[1] or 'none'})")
print("soak: OK" if ok else "soak: FAILED")
sys.exit(0 if ok else 1)
EOF
