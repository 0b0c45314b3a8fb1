#!/usr/bin/env bash
# The README's test command: install what is missing, build, run every test (C++ and Python).
set -euo pipefail
source "$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)/.ci/setup.sh"
cd "$FREEGAP_BUILD_DIR"
ctest --output-on-failure -j "$(nproc 2>/dev/null || echo 2)" "$@"
