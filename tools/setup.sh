#!/usr/bin/env bash
# Shared set-up of run-demo.sh and run-tests.sh: install the Debian packages
# wavestack needs (only the missing ones), then configure and build.
# Usage: source tools/setup.sh; ws_install PKG...; ws_build BUILD_DIR [cmake args...]
set -euo pipefail

WS_ROOT="$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)"

# Packages for building and running the program.
WS_BUILD_PACKAGES=(cmake ninja-build g++ pkg-config libfftw3-dev libhdf5-dev libopencv-dev
  libtbb-dev libtomlplusplus-dev libcli11-dev catch2)
# Packages the reference checks need (Debian's Python and its libraries).
WS_TEST_PACKAGES=(python3 python3-numpy python3-scipy python3-skimage python3-h5py)
# Packages of the fuzz smoke run only (libFuzzer needs clang; fuzz/README.md).
WS_FUZZ_PACKAGES=(clang-14 libfuzzer-14-dev libclang-rt-14-dev)

ws_install() {
  local missing=()
  for p in "$@"; do
    if ! dpkg-query -W -f='${Status}' "$p" 2>/dev/null | grep -q "install ok installed"; then
      missing+=("$p")
    fi
  done
  [ ${#missing[@]} -eq 0 ] && return 0
  echo "wavestack: installing ${missing[*]}" >&2
  local sudo=()
  if [ "$(id -u)" -ne 0 ]; then
    command -v sudo >/dev/null || { echo "wavestack: need root or sudo to install: ${missing[*]}" >&2; exit 1; }
    sudo=(sudo)
  fi
  export DEBIAN_FRONTEND=noninteractive
  "${sudo[@]}" apt-get update -qq
  "${sudo[@]}" apt-get install -y -qq --no-install-recommends "${missing[@]}" >/dev/null
}

# Extra cmake arguments (-DCMAKE_BUILD_TYPE=... overrides Release) apply when
# the folder is configured the first time; WS_BUILD_TARGETS (optional) limits
# what is built.
ws_build() {
  local dir="$1"; shift
  if [ ! -f "$dir/build.ninja" ]; then
    cmake -S "$WS_ROOT" -B "$dir" -G Ninja -DCMAKE_BUILD_TYPE=Release "$@" >/dev/null
  fi
  local targets=()
  [ -n "${WS_BUILD_TARGETS:-}" ] && targets=(--target ${WS_BUILD_TARGETS})
  cmake --build "$dir" --parallel "$(nproc)" "${targets[@]}"
}
