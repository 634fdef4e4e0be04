#!/usr/bin/env bash
# Fuzz smoke run (tests/run-tests.sh calls it; fuzz/README.md): build the
# libFuzzer targets with clang-14 (ASan + UBSan + coverage), replay the seed
# and regression corpora, then fuzz both targets at once (one per core).
#
# Usage: fuzz/smoke.sh BUILD_DIR [SECONDS per target, default 30] [TARGET...]
#   TARGET: pipeline_file and/or frame_source (default both)
# Exit status 1 on a finding in our code; its input and log are left in
# BUILD_DIR/findings/. A crash, leak or huge allocation inside libhdf5
# (Debian's, not instrumented; fuzz/triage.py tells) is printed as a known
# HDF5 finding, its input kept, and fuzzing goes on from where it was.
set -euo pipefail
here="$(cd "$(dirname "$0")" && pwd)"
source "$here/../tools/setup.sh"
build="$1"
seconds="${2:-30}"
targets=(pipeline_file frame_source)
[ $# -gt 2 ] && targets=("${@:3}")

WS_BUILD_TARGETS="fuzz_pipeline_file fuzz_frame_source" ws_build "$build" \
  -DCMAKE_C_COMPILER=clang-14 -DCMAKE_CXX_COMPILER=clang++-14 -DCMAKE_BUILD_TYPE=RelWithDebInfo \
  "-DCMAKE_CXX_FLAGS_RELWITHDEBINFO=-O1 -g1 -DNDEBUG" "-DCMAKE_C_FLAGS_RELWITHDEBINFO=-O1 -g1 -DNDEBUG" \
  -DWAVESTACK_FUZZ=ON -DWAVESTACK_BUILD_TESTS=OFF -DWAVESTACK_BUILD_BENCH=OFF

rm -rf "$build/seeds" "$build/findings"
mkdir -p "$build/findings"
/usr/bin/python3 "$here/make_seeds.py" "$build/seeds"

export UBSAN_OPTIONS="print_stacktrace=1:halt_on_error=1"
export LSAN_OPTIONS="suppressions=$WS_ROOT/tests/sanitizer/lsan.supp:print_suppressions=0"
# frame_source: HDF5 asks malloc for sizes read from the file and copes with
# NULL, so a huge request is not a finding (allocator_may_return_null); the
# suppressions need whole stacks through libhdf5 (no frame pointers there).
asan_pipeline_file="detect_leaks=1"
asan_frame_source="detect_leaks=1:allocator_may_return_null=1:fast_unwind_on_malloc=0"
common=(-rss_limit_mb=2048 -timeout=20)
extra_pipeline_file=(-dict="$here/pipeline_file.dict" -max_len=8192)
extra_frame_source=(-dict="$here/frame_source.dict" -max_len=16384)
replay_pipeline_file=("$build/seeds/pipeline_file" "$here/regressions/pipeline_file")
replay_frame_source=("$build/seeds/frame_source" "$build/seeds/frame_source_regressions")

# alone_in_hdf5 TARGET LOG: libhdf5 reads out of bounds without ASan seeing
# it, and can so land on memory that was ours a moment ago; such a report
# looks like ours, and so does running out of memory (the RSS check has no
# culprit). Replay the input alone, with a malloc limit that names the big
# allocation: true when it then fails inside libhdf5, or not at all (it
# needed HDF5 state left by earlier inputs).
alone_in_hdf5() {
  local t="$1" log="$2" asan="asan_$1" input
  [ "$t" = frame_source ] || return 1
  input=$(sed -n "s/.*Test unit written to //p" "$log" | tail -n 1)
  [ -f "$input" ] || return 1
  ASAN_OPTIONS="${!asan}" "$build/fuzz/fuzz_$t" -malloc_limit_mb=256 -rss_limit_mb=4096 "$input" >"$log.alone" 2>&1 && {
    echo "hdf5: does not fail when replayed alone (HDF5 state from earlier inputs); $(cut -c1-120 "$log.triage")" >"$log.triage"
    return 0
  }
  /usr/bin/python3 "$here/triage.py" "$log.alone" >"$log.triage"
}

# fuzz_for TARGET: fuzz until SECONDS are used up; after a known HDF5
# finding start again on the grown corpus. Logs in findings/TARGET-N.log.
fuzz_for() {
  local t="$1" bin="$build/fuzz/fuzz_$1" n=0 left
  local asan="asan_$t" extra="extra_$t[@]" replay="replay_$t[@]"
  local deadline=$((SECONDS + seconds))
  rm -rf "$build/corpus/$t" && mkdir -p "$build/corpus/$t"
  while left=$((deadline - SECONDS)); [ "$left" -gt 1 ] && [ "$n" -lt 100 ]; do
    n=$((n + 1))
    local log="$build/findings/$t-$n.log"
    if ASAN_OPTIONS="${!asan}" "$bin" "${common[@]}" "${!extra}" -artifact_prefix="$build/findings/$t-$n-" \
      -max_total_time="$left" -print_final_stats=1 "$build/corpus/$t" "${!replay}" >"$log" 2>&1; then
      break
    fi
    if ! /usr/bin/python3 "$here/triage.py" "$log" >"$log.triage" && ! alone_in_hdf5 "$t" "$log"; then
      echo "fuzz: $t: $(cat "$log.triage")" >&2
      grep -v -E '^(#[0-9]+|\s+NEW_FUNC|INFO:|"|Dictionary)' "$log" | tail -n 60 >&2
      echo "fuzz: $t: the input is in $build/findings/$t-$n-*" >&2
      return 1
    fi
    echo "fuzz: $t: known HDF5 finding, not ours (input kept as $build/findings/$t-$n-*): $(cut -c1-160 "$log.triage")" >&2
  done
  local execs
  execs=$(cat "$build/findings/$t"-*.log | awk '/^stat::number_of_executed_units:/ { n += $2 } END { print n + 0 }')
  echo "fuzz: $t: $execs runs in $seconds s over $n run(s); $(grep -h -o 'cov: [0-9]* ft: [0-9]*' \
    "$build/findings/$t-$n.log" | tail -n 1); corpus $(ls "$build/corpus/$t" | wc -l) inputs" >&2
}

passed=0
failed=0
for t in "${targets[@]}"; do
  # Replay: every seed and regression input once (-runs=0 stops after them).
  asan="asan_$t" extra="extra_$t[@]" replay="replay_$t[@]"
  if ASAN_OPTIONS="${!asan}" "$build/fuzz/fuzz_$t" "${common[@]}" "${!extra}" -runs=0 \
    -artifact_prefix="$build/findings/$t-replay-" "${!replay}" >"$build/findings/$t-replay.log" 2>&1; then
    passed=$((passed + 1))
  else
    failed=$((failed + 1))
    echo "fuzz: replaying the $t seeds and regressions failed:" >&2
    tail -n 40 "$build/findings/$t-replay.log" >&2
  fi
done
pids=()
for t in "${targets[@]}"; do
  fuzz_for "$t" &
  pids+=($!)
done
for pid in "${pids[@]}"; do
  if wait "$pid"; then passed=$((passed + 1)); else failed=$((failed + 1)); fi
done
echo "fuzz: $passed passed, $failed failed"
[ "$failed" -eq 0 ]
