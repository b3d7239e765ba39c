#!/usr/bin/env bash
# Fit benchmark (issue "Fit phase"): heft's whole fit (read Parquet + IRLS) on
# 1,000,000 rows × 20 numeric terms, side by side with statsmodels' GLM
# Binomial fit on the same data, alternating runs, whole-process wall time and
# peak RSS from GNU time. Needs Debian's python3-statsmodels.
#
#   bash cmd/heftbench/fit.sh [ROWS] [RUNS]
set -euo pipefail
cd "$(dirname "$0")/../.."
rows=${1:-1000000}
runs=${2:-5}
dir=.bench/fit
mkdir -p "$dir"
go build -o .bench/heft ./cmd/heft
go run ./cmd/heftbench/fitgen -rows "$rows" -terms 20 -parquet "$dir/fit.parquet" -raw "$dir/fit.f64"
covs=$(seq -s, -f 'x%g' 1 20)
/usr/bin/python3 cmd/heftbench/sidebyside.py -n "$runs" \
  --name "heft fit (read+IRLS)" -- ".bench/heft fit -q -o $dir/model.json --treatment t --covariates $covs $dir/fit.parquet" \
  --name "statsmodels GLM (load+fit)" -- "/usr/bin/python3 cmd/heftbench/statsmodels_fit.py $dir/fit.f64 20"
echo "design matrix: $rows × 21 float64 = $(( rows * 21 * 8 / 1048576 )) MiB"
echo "statsmodels' fit alone (inside the process, without Python start-up and loading):"
for i in 1 2 3; do /usr/bin/python3 cmd/heftbench/statsmodels_fit.py "$dir/fit.f64" 20; done
