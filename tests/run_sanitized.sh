#!/usr/bin/env bash
# The C++ unit tests (every GoogleTest case) built and run under AddressSanitizer and
# UndefinedBehaviorSanitizer, in a build directory of their own (default build-sanitize/).
# Any finding fails its test: a memory error, undefined behaviour or a leak in freegap's code.
#
#   bash tests/run_sanitized.sh [--all] [BUILD_DIR] [-- CTEST_ARGS...]
#
# --all runs the whole suite instead (the Python checks then run the sanitized `freegap`), except
# the tests labelled `no_sanitize`, which cannot run under the sanitizers (the label says why in
# the CMakeLists that sets it). Needs the packages of tests/run_all.sh (run that first on a fresh
# machine).
set -euo pipefail
root="$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)"

mode=unit
if [ "${1:-}" = "--all" ]; then
  mode=all
  shift
fi
build="$root/build-sanitize"
if [ $# -gt 0 ] && [ "$1" != "--" ]; then
  build="$1"
  shift
fi
[ "${1:-}" = "--" ] && shift

# halt_on_error: stop at the first finding with a non-zero exit; detect_leaks: LeakSanitizer at
# exit, with the third-party suppressions beside this script's tests. The exit code of a finding
# is 23 so that it cannot pass for an expected exit status (freegap uses 0-4).
asan=(halt_on_error=1 detect_leaks=1 exitcode=23 detect_stack_use_after_return=1
  check_initialization_order=1 strict_init_order=1 detect_odr_violation=2 strict_string_checks=1)
ASAN_OPTIONS="$(IFS=:; echo "${asan[*]}")"
export ASAN_OPTIONS
export UBSAN_OPTIONS="halt_on_error=1:print_stacktrace=1:exitcode=23"
export LSAN_OPTIONS="suppressions=$root/tests/sanitize/lsan.supp:print_suppressions=0:exitcode=23"
export OPENBLAS_NUM_THREADS="${OPENBLAS_NUM_THREADS:-1}"
# Checks that give a program a time limit (an estimator's timeout, a hang detector) scale it by
# this factor: instrumented programs start and run several times slower.
export FREEGAP_TEST_TIME_SCALE="${FREEGAP_TEST_TIME_SCALE:-10}"
# Debian 12's OpenBLAS (0.3.21) complex matrix-vector kernels for AVX cores (zgemv_n_HASWELL,
# zgemv_n_SANDYBRIDGE, reached from zgesdd in linalg::polar_factor_svd and from the norm estimates
# of linalg::polar_factor) read past the end of a small matrix; under the sanitizers' allocator
# that read can reach an unmapped page and the test dies
# with SEGV inside OpenBLAS (test_ensembles' Haar sampling does). It is OpenBLAS's read, not ours,
# and a SEGV cannot be suppressed, so the sanitized run uses OpenBLAS's SSE3 kernels, which stay
# inside the matrix. Results differ from the AVX kernels' only in rounding.
export OPENBLAS_CORETYPE=Prescott
if [ "$(id -u)" -eq 0 ]; then
  export OMPI_ALLOW_RUN_AS_ROOT=1 OMPI_ALLOW_RUN_AS_ROOT_CONFIRM=1
fi
export OMPI_MCA_rmaps_base_oversubscribe="${OMPI_MCA_rmaps_base_oversubscribe:-1}"
# OpenMPI's components stay loaded to the end, so that their leaks at exit name their library
# and tests/sanitize/lsan.supp can suppress them (an unloaded library is an "unknown module").
export OMPI_MCA_mca_base_component_disable_dlclose=1 PMIX_MCA_mca_base_component_disable_dlclose=1

jobs="$(nproc 2>/dev/null || echo 2)"
cmake -S "$root" -B "$build" -DCMAKE_BUILD_TYPE=Release -DFREEGAP_SANITIZE=ON \
  -DFREEGAP_BUILD_BENCHMARKS=OFF
cmake --build "$build" -j "$jobs"
cd "$build"
if [ "$mode" = unit ]; then
  # Some tests are pure numerics at sizes that take minutes each under the sanitizers (measured
  # 124–172 s on 2 cores: Sturm counts at N = 10^5, the largest eigenvalue at N = 10^6, the point
  # masses of polynomial limits; 20–51 s: the polynomial solver's moments, A B A and positive
  # expressions, whose code paths the other PolynomialLimit cases run, and the two below); they
  # are left to --all so that the CI run stays under 30 minutes.
  slow='EqualsLapackHistogramAtHundredThousand|GueLargestEigenvalueIsTracyWidom2AtOneMillion'
  slow+='|PointMassAtTheConstantTerm|PointMassBesideABandIsFoundAndWeighedExactly'
  slow+='|SingularPointLosesNoMassAndCostsNoMore|SolverMomentsMatchExactMoments'
  slow+='|ABAIsTheFreeMultiplicativeConvolution|PositiveExpressionsKeepTheirLowerEdgeAtZeroOrAbove'
  # 20–45 s each instrumented, pure numerics run by other cases too: the arcsine limit of the
  # two-projection path at N = 10^6, the CDF table of nested free sums.
  slow+='|ArcsineAtOneMillion|FreeSumsWithGapsAndNestingEqualTheLawsOwnCdf'
  ctest --output-on-failure -j "$jobs" -L '^sanitize$' -E "$slow" "$@"
else
  # OpenMPI is built without frame pointers: the slow unwinder follows a leak's stack into it, so
  # that the suppressions can recognise OpenMPI's own leaks when the checks run freegap on ranks.
  export ASAN_OPTIONS="$ASAN_OPTIONS:fast_unwind_on_malloc=0"
  ctest --output-on-failure -j "$jobs" -LE no_sanitize "$@"
fi
