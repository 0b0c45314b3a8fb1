#!/usr/bin/env bash
# Speed of `freegap report` on a 10-size run (a benchmark, not a test). Goal (issue: analysis):
# under 10 s without figures. The figures' share is timed separately.
#
#   tests/benchmarks/report_speed.sh [BUILD_DIR] [ROUNDS]
#
# Two runs of 10 sizes each, 64 trials per size, 200 bins, 4 kept spectra per size:
#   - "B + U B U^*" (limit by free additive convolution, the costly kind of limit: every CDF
#     value is a subordination solve until tabulated);
#   - "X" with X a GUE on the tridiagonal path (a closed-form limit).
# Prints the median wall time of `report --no-figures` and of `report` with figures.
set -euo pipefail
build="${1:-build}"
rounds="${2:-3}"
exe="$(cd "$build" && pwd)/freegap"
export OPENBLAS_NUM_THREADS=1 OMPI_ALLOW_RUN_AS_ROOT=1 OMPI_ALLOW_RUN_AS_ROOT_CONFIRM=1
work="$(mktemp -d)"
trap 'rm -rf "$work"' EXIT
common='sizes = [16, 24, 32, 48, 64, 96, 128, 192, 256, 384]
trials = 64
[observe]
bins = 200
range = "auto"
max_moment = 8
keep_spectra = 4
[run]
trials_per_unit = 4'
cat > "$work/free.toml" <<JOB
seed = 5
expression = "B + U B U^*"
$common
[matrices.B]
ensemble = "diagonal"
atoms = [[1.0, 0.5], [-1.0, 0.5]]
[matrices.U]
ensemble = "haar_unitary"
JOB
cat > "$work/gue.toml" <<JOB
seed = 6
expression = "X"
$common
[matrices.X]
ensemble = "gue"
JOB
median() { sort -g | awk '{a[NR]=$1} END {print a[int((NR+1)/2)]}'; }
for job in free gue; do
  "$exe" run "$work/$job.toml" -o "$work/$job.h5" --quiet
  for mode in tables figures; do
    flag=""; [ "$mode" = tables ] && flag="--no-figures"
    for r in $(seq "$rounds"); do
      start=$(date +%s%N)
      "$exe" report "$work/$job.h5" -o "$work/rep-$job" $flag > /dev/null
      end=$(date +%s%N)
      echo $(( (end - start) / 1000000 ))
    done | median | xargs printf "%-5s %-8s median %s ms over $rounds rounds\n" "$job" "$mode"
  done
done
