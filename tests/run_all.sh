#!/usr/bin/env bash
# The README's test command: install what is missing, build, and run every test:
#   1. the parsers' fuzz run: a clang build of its own in build-fuzz/, each target over every
#      input that ever crashed it, then 10,000 generated inputs (tests/fuzz/run_fuzz.sh);
#   2. the C++ unit tests built and run under AddressSanitizer and UndefinedBehaviorSanitizer, in
#      build-sanitize/ (tests/run_sanitized.sh);
#   3. the whole suite, C++ and Python (ctest in build/), last so that its summary closes the
#      output.
# With arguments, only step 3, with those arguments passed to ctest (e.g. -R store, -L sanitize).
set -euo pipefail
source "$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)/.ci/setup.sh"
jobs="$(nproc 2>/dev/null || echo 2)"
cd "$FREEGAP_BUILD_DIR"
if [ $# -gt 0 ]; then
  exec ctest --output-on-failure -j "$jobs" "$@"
fi
failed=()
step() {  # step NAME COMMAND...: runs it, times it, remembers a failure and goes on
  local name=$1 start=$SECONDS
  shift
  echo "== $name"
  if "$@"; then
    echo "== $name: passed in $((SECONDS - start)) s"
  else
    echo "== $name: FAILED after $((SECONDS - start)) s"
    failed+=("$name")
  fi
}
step "fuzzing (job, expression and matrix-file parsers)" bash "$FREEGAP_ROOT/tests/fuzz/run_fuzz.sh" \
  "$FREEGAP_ROOT/build-fuzz"
step "unit tests under AddressSanitizer and UndefinedBehaviorSanitizer" \
  bash "$FREEGAP_ROOT/tests/run_sanitized.sh" "$FREEGAP_ROOT/build-sanitize"
cd "$FREEGAP_BUILD_DIR"
status=0
ctest --output-on-failure -j "$jobs" || status=1
if [ ${#failed[@]} -gt 0 ]; then
  printf 'freegap: these steps failed: %s\n' "${failed[*]}"
  status=1
fi
exit "$status"
