#!/usr/bin/env bash
# Install what wavestack needs, build it, write the demo holograms and run the
# demo pipeline. Prints what it wrote, the speed, and where to look.
# Idempotent: a second run rebuilds only what changed and rewrites the data.
set -euo pipefail
here="$(cd "$(dirname "$0")" && pwd)"
source "$here/../tools/setup.sh"

build="${WAVESTACK_BUILD:-$WS_ROOT/build}"
ws_install "${WS_BUILD_PACKAGES[@]}"
ws_build "$build"
"$build/pipeline/wavestack" demo "$here"
