#!/bin/sh
# What the run file's checksums cost a run at N = 200: runs the same job with two freegap
# builds (without checksums: the commit before them; with: this one), alternating, REPEATS
# times each, one rank, and prints each run's wall and CPU seconds. RESULTS-integrity.md records
# a measurement.
#
# Usage: tests/benchmarks/integrity_overhead.sh FREEGAP_WITHOUT FREEGAP_WITH [REPEATS]
set -eu
without=$1
with=$2
repeats=${3:-5}
dir=$(mktemp -d)
trap 'rm -rf "$dir"' EXIT
export OPENBLAS_NUM_THREADS=1 OMPI_ALLOW_RUN_AS_ROOT=1 OMPI_ALLOW_RUN_AS_ROOT_CONFIRM=1
# A scenario of our own: a two-level system's levels mixed by a random basis, N = 200.
cat > "$dir/job.toml" <<'JOB'
name = "two-level mixing at N = 200"
seed = 977
sizes = [200]
trials = 192
expression = "B + U B U^*"

[matrices.B]
ensemble = "diagonal"
atoms = [[1.0, 0.5], [-1.0, 0.5]]

[matrices.U]
ensemble = "haar_unitary"

[observe]
bins = 100
range = [-2.5, 2.5]
max_moment = 8
keep_spectra = 16

[run]
trials_per_unit = 4
force_dense = true  # the dense path these numbers were measured on
JOB
printf '%-8s %6s %8s %8s\n' build run wall_s cpu_s
i=1
while [ "$i" -le "$repeats" ]; do
  for build in without with; do
    eval exe=\$$build
    rm -f "$dir/run.h5"
    /usr/bin/time -f "%e %U %S" -o "$dir/time" "$exe" run "$dir/job.toml" -q -o "$dir/run.h5"
    read -r wall user sys < "$dir/time"
    printf '%-8s %6d %8s %8.2f\n' "$build" "$i" "$wall" "$(echo "$user + $sys" | bc -l)"
  done
  i=$((i + 1))
done
