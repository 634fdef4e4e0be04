#!/usr/bin/env bash
# Peak memory must not grow with the number of frames: run the throughput
# benchmark on 20 and on 200 frames and compare peak RSS (target: within 10%).
# usage: tests/bench/run-memory-check.sh BUILD_DIR [SIZE]
set -euo pipefail
build="${1:-build}"; size="${2:-2048}"
dir="$(mktemp -d)"; trap 'rm -rf "$dir"' EXIT
a=$("$build/tests/bench/bench_pipeline_throughput" --frames 20 --repeats 1 --size "$size" --dir "$dir" | awk '/peak RSS/{print $3}')
rm -f "$dir/holograms.h5"
b=$("$build/tests/bench/bench_pipeline_throughput" --frames 200 --repeats 1 --size "$size" --dir "$dir" | awk '/peak RSS/{print $3}')
awk -v a="$a" -v b="$b" 'BEGIN{printf "peak RSS: 20 frames %d KiB, 200 frames %d KiB, ratio %.3f (target <= 1.10)\n", a, b, b/a}'
