#!/bin/bash
# The parsers' fuzz run: `tests/fuzz/run_fuzz.sh BUILD_DIR`.
#
# Configures BUILD_DIR as a clang build with -DFREEGAP_FUZZ=ON (tests and benchmarks off), builds
# only the fuzz targets (fuzz_job, fuzz_expression, fuzz_matrix_file) and what they need, then
# runs each over its regression inputs (tests/fuzz/regressions/<target>/) and for 10,000 generated inputs with
# seed 1 (-runs=10000 -seed=1 -timeout=10 -rss_limit_mb=4096; run_target.sh). Exits non-zero on
# any crash, leak, timeout or out-of-memory; the offending input is left in
# BUILD_DIR/tests/fuzz/artifacts-<target>/ — add it to regressions/<target>/ with the fix.
#
# Time budget in CI: under 5 minutes on 2 cores, configure and build included (measured:
# tests/benchmarks/RESULTS-inputs.md).
set -euo pipefail
if (($# != 1)); then
  echo "usage: tests/fuzz/run_fuzz.sh BUILD_DIR" >&2
  exit 2
fi
src=$(cd "$(dirname "$0")/../.." && pwd)
build=$1
launcher=()
if command -v ccache >/dev/null; then
  launcher=(-DCMAKE_CXX_COMPILER_LAUNCHER=ccache -DCMAKE_C_COMPILER_LAUNCHER=ccache)
fi
start=$SECONDS
cmake -S "$src" -B "$build" -DCMAKE_BUILD_TYPE=Release \
  -DCMAKE_C_COMPILER=clang -DCMAKE_CXX_COMPILER=clang++ "${launcher[@]}" \
  -DFREEGAP_FUZZ=ON -DFREEGAP_BUILD_TESTS=OFF -DFREEGAP_BUILD_BENCHMARKS=OFF >/dev/null
cmake --build "$build" -j2 --target fuzz_job fuzz_expression fuzz_matrix_file
echo "fuzz: configured and built in $((SECONDS - start)) s"
cd "$build/tests/fuzz"
ctest -R '^fuzz\.' --output-on-failure
echo "fuzz: done in $((SECONDS - start)) s"
