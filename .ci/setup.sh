#!/usr/bin/env bash
# Shared set-up for the README's two commands: install what is missing (Debian), configure and
# build. Idempotent: with everything installed and nothing changed it only checks and returns.
# Sourced by jobs/run_demo.sh and tests/run_all.sh; sets FREEGAP_BUILD_DIR.
set -euo pipefail

FREEGAP_ROOT="$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)"
FREEGAP_BUILD_DIR="${FREEGAP_BUILD_DIR:-$FREEGAP_ROOT/build}"
export FREEGAP_ROOT FREEGAP_BUILD_DIR

# The stack as Debian 12 ships it (docs/building.md); python3-* are Debian's, for plots and
# cross-checks, and are used through /usr/bin/python3.
FREEGAP_PACKAGES=(
  build-essential cmake pkg-config git openssh-client
  libopenmpi-dev openmpi-bin libeigen3-dev libhdf5-dev hdf5-tools libcli11-dev
  libgtest-dev libbenchmark-dev libopenblas-dev liblapacke-dev librandom123-dev
  libtomlplusplus-dev python3 python3-numpy python3-scipy python3-h5py python3-matplotlib
  # A real one-node Slurm for tests/slurm (started by hand, no systemd; docs/cluster-notes.md §3).
  slurmctld slurmd slurm-client munge
  # The installed-tree test loads freegap's module file with Lmod (tests/install/check_install.py);
  # fuzzing needs clang with libFuzzer's runtime (tests/fuzz).
  lmod clang libclang-rt-14-dev
)

freegap_missing_packages() {
  local p missing=()
  for p in "${FREEGAP_PACKAGES[@]}"; do
    dpkg-query -W -f='${Status}' "$p" 2>/dev/null | grep -q "install ok installed" || missing+=("$p")
  done
  echo "${missing[@]:-}"
}

freegap_install() {
  local missing
  missing="$(freegap_missing_packages)"
  [ -z "$missing" ] && return 0
  if [ "$(id -u)" -ne 0 ]; then
    echo "freegap: these Debian packages are missing: $missing" >&2
    echo "freegap: install them with:" >&2
    echo "  sudo apt-get update && sudo apt-get install -y --no-install-recommends $missing" >&2
    exit 1
  fi
  echo "freegap: installing $missing"
  export DEBIAN_FRONTEND=noninteractive
  apt-get update -qq
  # shellcheck disable=SC2086
  apt-get install -y -qq --no-install-recommends $missing
}

freegap_build() {
  local jobs
  jobs="$(nproc 2>/dev/null || echo 2)"
  if [ ! -f "$FREEGAP_BUILD_DIR/CMakeCache.txt" ]; then
    cmake -S "$FREEGAP_ROOT" -B "$FREEGAP_BUILD_DIR" -DCMAKE_BUILD_TYPE=Release
  fi
  cmake --build "$FREEGAP_BUILD_DIR" -j "$jobs"
}

# One rank per core, one BLAS thread beats threads (docs/performance.md §8); MPI as root needs the
# override (docs/cluster-notes.md §1.1). Harmless when not root.
export OPENBLAS_NUM_THREADS="${OPENBLAS_NUM_THREADS:-1}"
if [ "$(id -u)" -eq 0 ]; then
  export OMPI_ALLOW_RUN_AS_ROOT=1 OMPI_ALLOW_RUN_AS_ROOT_CONFIRM=1
fi
export OMPI_MCA_rmaps_base_oversubscribe="${OMPI_MCA_rmaps_base_oversubscribe:-1}"

freegap_install
freegap_build
