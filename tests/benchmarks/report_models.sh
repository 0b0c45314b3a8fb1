#!/usr/bin/env bash
# Time of `freegap report --no-figures` for every example job and for the limit engine's harder
# models (a benchmark, not a test). Goal (issue: limit engine): under 10 s each.
#
#   tests/benchmarks/report_models.sh [BUILD_DIR] [ROUNDS]
#
# Each job runs once on 2 ranks (the example jobs as shipped; the models below at N = 100, 200,
# 400 with 20 trials, the gapped ones at N = 1000 with 4 trials), then its report is timed ROUNDS
# times (median). The report's time is mostly the limit (building its CDF table) and the
# distances; it grows with the kept spectra, not with the run's length otherwise.
#   - semicircle ⊞ 200 atoms: "0.5 X + D", D with 200 atoms at seeded random places and weights;
#   - two models with gaps: "A + U B U^*" (uniform ⊞ atoms 0 and 3) and "0.5 X + D" (D = ±1);
#   - "A B A" with A a GUE and B a Wishart matrix (a positive middle factor), and "X1 X2 + X2 X1"
#     is the example job gue-anticommutator (the polynomial solver).
set -euo pipefail
build="${1:-build}"
rounds="${2:-3}"
exe="$(cd "$build" && pwd)/freegap"
repo="$(cd "$(dirname "$0")/../.." && pwd)"
export OPENBLAS_NUM_THREADS=1 OMPI_ALLOW_RUN_AS_ROOT=1 OMPI_ALLOW_RUN_AS_ROOT_CONFIRM=1
work="$(mktemp -d)"
trap 'rm -rf "$work"' EXIT

small='sizes = [100, 200, 400]
trials = 20
[observe]
bins = 200
range = "auto"
max_moment = 6
[run]
trials_per_unit = 5'
atoms=$(python3 - <<'PY'
import random
random.seed(2026)
pts = sorted(random.uniform(-3, 3) for _ in range(200))
w = [random.uniform(0.5, 1.5) for _ in pts]
s = sum(w)
print("[" + ", ".join("[%.6f, %r]" % (p, x / s) for p, x in zip(pts, w)) + "]")
PY
)
cat > "$work/semicircle-200-atoms.toml" <<JOB
seed = 31
expression = "0.5 X + D"
$small
[matrices.X]
ensemble = "gue"
[matrices.D]
ensemble = "diagonal"
atoms = $atoms
JOB
cat > "$work/sandwich-aba.toml" <<JOB
seed = 32
expression = "A B A"
$small
[matrices.A]
ensemble = "gue"
[matrices.B]
ensemble = "wishart_complex"
ratio = 0.5
JOB
gapped='sizes = [1000]
trials = 4
[observe]
bins = 200
range = "auto"
max_moment = 4
keep_spectra = 4
[run]
trials_per_unit = 2'
cat > "$work/gap-uniform-atoms.toml" <<JOB
seed = 41
expression = "A + U B U^*"
$gapped
[matrices.A]
ensemble = "diagonal"
law = "uniform"
low = -1.0
high = 1.0
[matrices.B]
ensemble = "diagonal"
atoms = [[0.0, 0.6], [3.0, 0.4]]
[matrices.U]
ensemble = "haar_unitary"
JOB
cat > "$work/gap-broadened-levels.toml" <<JOB
seed = 42
expression = "0.5 X + D"
$gapped
[matrices.X]
ensemble = "gue"
[matrices.D]
ensemble = "diagonal"
atoms = [[-1.0, 0.5], [1.0, 0.5]]
JOB

median() { sort -g | awk '{a[NR]=$1} END {print a[int((NR+1)/2)]}'; }
printf "%-28s %10s %12s\n" "job" "run (s)" "report (ms)"
for job in "$repo"/jobs/*.toml "$work"/*.toml; do
  name="$(basename "$job" .toml)"
  start=$(date +%s%N)
  mpirun -np 2 --oversubscribe "$exe" run "$job" -o "$work/$name.h5" --quiet > /dev/null
  run_s=$(( ($(date +%s%N) - start) / 1000000000 ))
  ms=$(for r in $(seq "$rounds"); do
    start=$(date +%s%N)
    "$exe" report "$work/$name.h5" -o "$work/rep-$name" --no-figures > /dev/null
    echo $(( ($(date +%s%N) - start) / 1000000 ))
  done | median)
  printf "%-28s %10s %12s\n" "$name" "$run_s" "$ms"
done
