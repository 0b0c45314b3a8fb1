#!/bin/bash
# Runs one fuzz target: `run_target.sh regressions|campaign EXE SOURCE_DIR NAME WORK_DIR`.
#   regressions: every file in SOURCE_DIR/regressions/NAME/, once each;
#   campaign:    10,000 generated inputs with seed 1, starting from SOURCE_DIR/corpus/NAME/
#                (copied: libFuzzer adds new inputs to its first corpus directory, and the
#                source tree stays untouched).
# Exits non-zero on any crash, leak, timeout (> 10 s for one input) or memory use above 4 GiB.
set -euo pipefail
mode=$1 exe=$2 src=$3 name=$4 work=$5
limits=(-timeout=10 -rss_limit_mb=4096 -malloc_limit_mb=4096)
mkdir -p "$work/artifacts-$name"
export ASAN_OPTIONS=detect_leaks=1:abort_on_error=0 UBSAN_OPTIONS=print_stacktrace=1
export OPENBLAS_NUM_THREADS=1
case $mode in
  regressions)
    shopt -s nullglob
    inputs=("$src/regressions/$name"/*)
    if ((${#inputs[@]} == 0)); then
      echo "no regression inputs in $src/regressions/$name" >&2
      exit 1
    fi
    exec "$exe" "${limits[@]}" -artifact_prefix="$work/artifacts-$name/" "${inputs[@]}"
    ;;
  campaign)
    rm -rf "$work/corpus-$name"
    mkdir -p "$work/corpus-$name"
    exec "$exe" "${limits[@]}" -runs=10000 -seed=1 -max_len=4096 \
      -artifact_prefix="$work/artifacts-$name/" "$work/corpus-$name" "$src/corpus/$name"
    ;;
  *)
    echo "usage: run_target.sh regressions|campaign EXE SOURCE_DIR NAME WORK_DIR" >&2
    exit 2
    ;;
esac
