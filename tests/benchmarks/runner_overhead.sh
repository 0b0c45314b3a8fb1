#!/usr/bin/env bash
# Runner overhead and 1 → 2 rank scaling (a benchmark, not a test).
#
#   tests/benchmarks/runner_overhead.sh [BUILD_DIR] [ROUNDS] [N] [TRIALS]
#
# The same trials of B + U B U^* at N (default 800; units of 3 trials, ≥ 0.2 s each) run
#   (a) through the library in a loop: `freegap sample` (sample → evaluate → eigenvalues →
#       observe, no file, no MPI);
#   (b) through `freegap run` as one process (MPI singleton, HDF5 file, commits);
#   (c) through `mpirun -np 2 freegap run`.
# Overhead = b/a − 1 (goal ≤ 3 %); scaling = b/c (goal ≥ 1.8× on 2 cores). Rounds alternate the
# three so machine noise hits them alike; medians are printed.
set -euo pipefail
build="${1:-build}"
rounds="${2:-3}"
n="${3:-800}"
trials="${4:-48}"
exe="$(cd "$build" && pwd)/freegap"
export OPENBLAS_NUM_THREADS=1 OMPI_ALLOW_RUN_AS_ROOT=1 OMPI_ALLOW_RUN_AS_ROOT_CONFIRM=1
work="$(mktemp -d)"
trap 'rm -rf "$work"' EXIT
cat > "$work/job.toml" <<JOB
# Benchmark job: the free sum of two ±1 spectra at one size.
seed = 99
sizes = [$n]
trials = $trials
expression = "B + U B U^*"
[matrices.B]
ensemble = "diagonal"
atoms = [[1.0, 0.5], [-1.0, 0.5]]
[matrices.U]
ensemble = "haar_unitary"
[observe]
bins = 200
range = [-2.5, 2.5]
max_moment = 8
[run]
trials_per_unit = 3
force_dense = true  # the dense path these numbers were measured on
JOB
now() { date +%s.%N; }
a=(); b=(); c=()
for r in $(seq "$rounds"); do
  t0=$(now)
  "$exe" sample -m "B=diagonal:atoms=1@0.5,-1@0.5" -m U=haar_unitary -e "B + U B U^*" \
    -n "$n" -t "$trials" -s 99 -k 8 > /dev/null
  t1=$(now)
  "$exe" run "$work/job.toml" -o "$work/one.h5" --fresh --quiet > /dev/null
  t2=$(now)
  mpirun -np 2 -x OPENBLAS_NUM_THREADS "$exe" run "$work/job.toml" -o "$work/two.h5" --fresh \
    --quiet > /dev/null
  t3=$(now)
  a+=("$(awk "BEGIN{print $t1 - $t0}")"); b+=("$(awk "BEGIN{print $t2 - $t1}")"); c+=("$(awk "BEGIN{print $t3 - $t2}")")
  echo "round $r: library loop ${a[-1]} s, run 1 process ${b[-1]} s, run 2 ranks ${c[-1]} s  (load $(cut -d' ' -f1 /proc/loadavg))"
done
median() { printf '%s\n' "$@" | sort -g | awk '{v[NR]=$1} END {print (NR%2 ? v[(NR+1)/2] : (v[NR/2]+v[NR/2+1])/2)}'; }
ma=$(median "${a[@]}"); mb=$(median "${b[@]}"); mc=$(median "${c[@]}")
h5diff --exclude-path /provenance "$work/one.h5" "$work/two.h5" > /dev/null && same="identical" || same="DIFFERENT"
printf '\n| trials | library loop (s) | freegap run, 1 process (s) | overhead | mpirun -np 2 (s) | speed-up 1→2 |\n'
printf '|---|---|---|---|---|---|\n'
printf '| %s × N=%s | %.2f | %.2f | %+.1f %% | %.2f | %.2f× |\n' "$trials" "$n" "$ma" "$mb" "$(awk "BEGIN{print ($mb/$ma - 1)*100}")" "$mc" "$(awk "BEGIN{print $mb/$mc}")"
echo "run files of 1 and 2 ranks outside /provenance: $same"
