#!/usr/bin/env bash
# Long runs stream with flat memory and without leaks. A stack of small
# off-axis holograms (one frame per chunk) goes through fringe -> sideband ->
# propagate -> unwrap -> drymass with products phase and opd:
#   1. peak RSS of LONG frames must be within 10% of SHORT frames (same input file);
#   2. the LONG output is checked with h5py (shapes, /frames/done all 1, table rows);
#   3. valgrind --leak-check=full on LEAK frames: definitely + indirectly lost must be
#      0 bytes outside the third-party noise of run-long-run-check.supp;
#   4. heaptrack on LEAK frames, summary printed for information.
# Exits 1 when the ratio exceeds 1.10, the output check fails or valgrind finds a leak or a
# memory error; 2 when something needed is missing.
#
# usage: tests/bench/run-long-run-check.sh BUILD_DIR [LONG [SHORT [LEAK [SIZE]]]]
#        defaults 20000 1000 200 128; a few minutes on 2 cores, writing the input takes longest.
# env:   PLANNING=estimate|measure (FFT planning of every run, default estimate)
#        LEAK_TOOLS="valgrind heaptrack" (either or none: LEAK_TOOLS=)
#        WORK=DIR keeps the input, outputs and logs in DIR (a DIR/input.h5 with enough frames is reused)
set -euo pipefail
here="$(cd "$(dirname "$0")" && pwd)"; root="$(cd "$here/../.." && pwd)"
build="$(cd "${1:-build}" && pwd)"; long="${2:-20000}"; short="${3:-1000}"; leak="${4:-200}"; size="${5:-128}"
planning="${PLANNING:-estimate}"; tools="${LEAK_TOOLS-valgrind heaptrack}"
exe="$build/pipeline/wavestack"
[[ -x "$exe" ]] || { echo "no program at $exe: build the wavestack target first" >&2; exit 2; }
for tool in $tools; do
  command -v "$tool" > /dev/null || { echo "$tool is not installed (apt-get install $tool)" >&2; exit 2; }
done
if [[ -n "${WORK:-}" ]]; then dir="$WORK"; mkdir -p "$dir"; else dir="$(mktemp -d)"; trap 'rm -rf "$dir"' EXIT; fi
# Measured FFT wisdom goes to a cache of this check only, never the user's.
export WAVESTACK_FFT_PLANNING="$planning" XDG_CACHE_HOME="$dir/cache"

input="$dir/input.h5"
if ! /usr/bin/python3 -c "import h5py,sys; s=h5py.File('$input')['holograms'].shape; sys.exit(s[0] < $long or s[1:] != ($size,$size))" 2>/dev/null; then
  echo "writing $long holograms of ${size}x$size uint16 ..."
  /usr/bin/python3 "$here/long_run_input.py" make "$input" "$long" "$size"
fi
cat > "$dir/pipeline.toml" <<EOF
# Load test of tests/bench/run-long-run-check.sh (holograms of long_run_input.py).
[input]
path = "$input"
dataset = "/holograms"
[instrument]
profile = "$root/calibration/demo-40x-0.75na.toml"
[[stage]]
type = "fringe"
dc = "mean"
[[stage]]
type = "sideband"
order = "+1"
[[stage]]
type = "propagate"
distance = "-3 um"            # the holograms are defocused by +3 um
[[stage]]
type = "unwrap"
[[stage]]
type = "drymass"              # a per-frame table: its rows are kept in memory until the end
threshold = "fixed"
threshold_opd = "30 nm"
exclude_border = true
[output]
path = "out.h5"
products = ["phase", "opd"]
previews = "none"
EOF

# run NAME FRAMES [WRAPPER...]: peak RSS (KiB) and wall time of one run, from /usr/bin/time -v
run() {
  local name="$1" n="$2"; shift 2
  /usr/bin/time -v -o "$dir/$name.time" "$@" "$exe" run "$dir/pipeline.toml" -o "$dir/$name.h5" \
    --frames "0:$n" --quiet > "$dir/$name.log" 2>&1 || { cat "$dir/$name.log" >&2; echo "run $name failed" >&2; exit 1; }
}
rss() { awk -F': ' '/Maximum resident set size/{print $2}' "$dir/$1.time"; }
wall() { awk -F': ' '/Elapsed \(wall clock\)/{print $2}' "$dir/$1.time"; }

if [[ "$planning" == measure ]]; then run warmup 4; fi # both runs then load the same wisdom
run short "$short"
run long "$long"
echo "frames ${size}x$size uint16, FFT planning $planning, threads: all cores ($(nproc))"
echo "run $short frames: peak RSS $(rss short) KiB, wall $(wall short)"
echo "run $long frames: peak RSS $(rss long) KiB, wall $(wall long)"
status=0
/usr/bin/python3 "$here/long_run_input.py" check "$dir/long.h5" "$long" || status=1
awk -v a="$(rss short)" -v b="$(rss long)" -v s="$short" -v l="$long" 'BEGIN{
  printf "peak RSS ratio %d/%d frames: %.3f (target <= 1.10), growth %d KiB\n", l, s, b/a, b-a; exit !(b/a <= 1.10)}' || status=1

for tool in $tools; do
  case "$tool" in
  valgrind)
    run valgrind "$leak" valgrind --leak-check=full --show-leak-kinds=definite,indirect,possible \
      --suppressions="$here/run-long-run-check.supp" --log-file="$dir/valgrind.txt"
    lost() { awk -v k="$1 lost:" 'index($0, k){gsub(",", "", $4); print $4}' "$dir/valgrind.txt"; }
    def=$(lost definitely); ind=$(lost indirectly); pos=$(lost possibly)
    errs=$(awk '/ERROR SUMMARY/{print $4}' "$dir/valgrind.txt")
    sup=$(awk '/suppressed:/ && /bytes/{gsub(",", "", $3); print $3}' "$dir/valgrind.txt")
    echo "valgrind, $leak frames: definitely lost ${def:-0} bytes, indirectly lost ${ind:-0} bytes," \
      "possibly lost ${pos:-0} bytes, ${sup:-0} bytes suppressed (third-party, run-long-run-check.supp)," \
      "${errs:-?} errors; wall $(wall valgrind)"
    if [[ "${def:-0}" != 0 || "${ind:-0}" != 0 || "${errs:-1}" != 0 ]]; then
      echo "valgrind found leaks or memory errors: full log $dir/valgrind.txt" >&2
      status=1
    fi ;;
  heaptrack)
    rm -f "$dir"/heaptrack.zst "$dir"/heaptrack.gz
    run heaptrack "$leak" heaptrack -o "$dir/heaptrack"
    heaptrack_print -f "$(ls "$dir"/heaptrack.zst "$dir"/heaptrack.gz 2>/dev/null | head -1)" -l 1 -n 40 -s 1 -a 0 -p 0 -T 0 > "$dir/heaptrack.txt" 2>/dev/null
    echo "heaptrack, $leak frames (informational; wall $(wall heaptrack)):"
    grep -E '^(calls to allocation functions|temporary memory allocations|peak heap memory consumption|peak RSS|total memory leaked)' \
      "$dir/heaptrack.txt" | sed 's/^/  /'
    # "leaked" here is all memory not freed at exit; list the sites in our program, the rest is library statics
    echo "  not freed at exit, allocated directly in wavestack (process-lifetime caches and statics):"
    awk '/leaked over/ && !/from:/{size=$1; getline; fn=$0; while ($0 !~ /^ *in / && (getline) > 0) {} if ($0 ~ /\/wavestack$/) print "    " size "  " substr(fn, 1, 110)}' \
      "$dir/heaptrack.txt" ;;
  *) echo "unknown leak tool $tool" >&2; exit 2 ;;
  esac
done
exit "$status"
