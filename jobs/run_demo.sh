#!/usr/bin/env bash
# The README's demo command: install what is missing, build, run a small job on two local MPI
# ranks, print what the run file holds with each size's moments, and report it against its limit
# (build/demo-report/: report.md, tables and figures).
#
# Re-running it resumes the same run file, which is already complete, so a second run is quick;
# delete build/demo.h5 (or pass --fresh to freegap run) to sample again.
set -euo pipefail
source "$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)/.ci/setup.sh"
exe="$FREEGAP_BUILD_DIR/freegap"
out="$FREEGAP_BUILD_DIR/demo.h5"

echo "== what freegap will compute =="
"$exe" run "$FREEGAP_ROOT/jobs/demo.toml" -o "$out" --explain | tail -n 12
echo
echo "== running on 2 local MPI ranks =="
mpirun -np 2 -x OPENBLAS_NUM_THREADS "$exe" run "$FREEGAP_ROOT/jobs/demo.toml" -o "$out"
echo
echo "== the run file (limit: arcsine law, m2 = 2, m4 = 6, m6 = 20, m8 = 70, norm 2) =="
"$exe" inspect "$out" --moments
echo
echo "== against the limit: errors per size, rates and figures =="
# freegap replaces a report directory only when it lists its own files (.freegap-output); the
# demo's folder in build/ may hold a report of an earlier freegap without that list: the demo's own.
if [ -f "$FREEGAP_BUILD_DIR/demo-report/report.md" ] && [ ! -f "$FREEGAP_BUILD_DIR/demo-report/.freegap-output" ]; then
  rm -rf "$FREEGAP_BUILD_DIR/demo-report"
fi
"$exe" report "$out" -o "$FREEGAP_BUILD_DIR/demo-report"
echo "open $FREEGAP_BUILD_DIR/demo-report/report.md and $FREEGAP_BUILD_DIR/demo-report/figures/"
