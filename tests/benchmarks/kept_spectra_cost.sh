#!/usr/bin/env bash
# What keeping every trial's spectrum costs (a benchmark, not a test; issue: rates that resolve).
#
#   tests/benchmarks/kept_spectra_cost.sh [BUILD_DIR] [ROUNDS]
#
# 1. The run: `B + U B U^*` (dense path, Haar unitary) at N = 200 and 400, 40 trials on one rank,
#    with keep_spectra = "none" and "all"; median wall time of ROUNDS rounds each and the ratio.
#    Goal: under 1 % more at N ≥ 200 (a spectrum is 8N bytes against O(N³) work).
# 2. The report: a GUE ladder of 10 sizes (N = 160, 320, …, 1600), 1000 trials each, every
#    spectrum kept (tridiagonal path, 2 ranks), then `freegap report --no-figures`; median wall
#    time of ROUNDS rounds. Goal: under 10 s.
set -euo pipefail
build="${1:-build}"
rounds="${2:-3}"
exe="$(cd "$build" && pwd)/freegap"
export OPENBLAS_NUM_THREADS=1 OMPI_ALLOW_RUN_AS_ROOT=1 OMPI_ALLOW_RUN_AS_ROOT_CONFIRM=1
work="$(mktemp -d)"
trap 'rm -rf "$work"' EXIT
median() { sort -g | awk '{a[NR]=$1} END {print a[int((NR+1)/2)]}'; }
ms() { local s e; s=$(date +%s%N); "$@" > /dev/null; e=$(date +%s%N); echo $(( (e - s) / 1000000 )); }

for n in 200 400; do
  for keep in none all; do
    cat > "$work/free-$n-$keep.toml" <<JOB
seed = 5
sizes = [$n]
trials = 40
expression = "B + U B U^*"
[matrices.B]
ensemble = "diagonal"
atoms = [[1.0, 0.5], [-1.0, 0.5]]
[matrices.U]
ensemble = "haar_unitary"
[observe]
keep_spectra = "$keep"
[run]
trials_per_unit = 4
force_dense = true  # the dense path these numbers were measured on
JOB
    for r in $(seq "$rounds"); do
      ms "$exe" run "$work/free-$n-$keep.toml" -o "$work/free-$n-$keep.h5" --quiet --fresh
    done | median > "$work/t-$n-$keep"
  done
  none=$(cat "$work/t-$n-none") all=$(cat "$work/t-$n-all")
  awk -v n="$n" -v a="$none" -v b="$all" \
    'BEGIN {printf "run  N = %-5d 40 trials: keep none %d ms, keep all %d ms: %+.1f %%\n", n, a, b, 100 * (b - a) / a}'
done

cat > "$work/gue.toml" <<'JOB'
seed = 6
sizes = [160, 320, 480, 640, 800, 960, 1120, 1280, 1440, 1600]
trials = 1000
expression = "X"
[matrices.X]
ensemble = "gue"
[observe]
keep_spectra = "all"
[run]
trials_per_unit = 50
JOB
t=$(ms mpirun -np 2 "$exe" run "$work/gue.toml" -o "$work/gue.h5" --quiet)
echo "GUE ladder 10 sizes x 1000 trials, every spectrum kept: run ${t} ms on 2 ranks, file $(du -h "$work/gue.h5" | cut -f1)"
for r in $(seq "$rounds"); do
  ms "$exe" report "$work/gue.h5" -o "$work/rep" --no-figures
done | median | xargs printf "report --no-figures: median %s ms over $rounds rounds\n"
