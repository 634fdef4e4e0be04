#!/usr/bin/env bash
# Install what the tests need, build, and run every test (unit tests,
# reference checks against numpy/scipy/scikit-image/h5py, pipeline tests).
# Idempotent: a second run only rebuilds what changed.
# Usage: ./tests/run-tests.sh [BUILD_DIR] [-- ctest args...]
set -euo pipefail
here="$(cd "$(dirname "$0")" && pwd)"
source "$here/../tools/setup.sh"

build="${1:-$WS_ROOT/build}"
[ $# -gt 0 ] && shift
[ "${1:-}" = "--" ] && shift

ws_install "${WS_BUILD_PACKAGES[@]}" "${WS_TEST_PACKAGES[@]}"
ws_build "$build"
cd "$build"
ctest --output-on-failure --timeout 600 -j "$(nproc)" "$@"
