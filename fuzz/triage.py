#!/usr/bin/python3
"""Tells whether a libFuzzer log ends in a finding inside libhdf5 (Debian's
HDF5, not instrumented and not ours to fix) or in our code.

usage: /usr/bin/python3 triage.py LOG
Prints one line: "hdf5: <what> in <function>" and exits 0 when the first
frame of every report that is not the sanitizer's, libFuzzer's or libc's
own lies in libhdf5; prints "ours: ..." and exits 1 otherwise (our frames,
an Error of the wrong kind, a UBSan report, a timeout or out-of-memory in
our code, or a log it cannot read). fuzz/README.md "Findings" lists what
was seen.
"""
import re
import sys

REPORT = re.compile(r"==\d+==\s*ERROR: (\w+): (.*)|runtime error: (.*)|^fuzz_\w+: (.*)|stack smashing detected")
FRAME = re.compile(r"^\s+#\d+ 0x[0-9a-f]+(?: in (.*))?\s+(\S+)$")
# Frames of the machinery around the finding, skipped to reach the culprit.
MACHINERY = re.compile(r"^(__sanitizer|__asan|__lsan|__ubsan|__interceptor|__libc|fuzzer::|malloc|calloc|realloc|"
                       r"free|operator|mem[a-z]*$|str[a-z]*$|raise|abort|__pthread|__stack_chk|__fortify)")


def frame(line):
    """(function, where) of a stack frame line, where = module or source path."""
    m = FRAME.match(re.sub(r"\s*\(BuildId: [0-9a-f]+\)", "", line))
    if not m:
        return None
    func, loc = m.group(1) or "", m.group(2)
    mod = re.match(r"\(?(.+?)\+0x[0-9a-f]+\)?$", loc)
    return func, mod.group(1) if mod else loc


def culprit(lines):
    """(where, function) of the first frame of the stack at the top of `lines`
    that is not machinery; where is a module or a source file."""
    started = False
    for line in lines:
        f = frame(line)
        if f is None:
            if started:
                break  # the end of this stack
            continue
        started = True
        func, where = f
        if MACHINERY.match(func) or "libc.so" in where or where.startswith(("nptl/", "signal/", "stdlib/", "libio/", "debug/", "csu/", "string/", "malloc/")):
            continue
        return where, func or "?"
    return None, None


def named_hdf5_frame(lines):
    """The first libhdf5 function with a name in the stack, for the summary."""
    for line in lines:
        f = frame(line)
        if f and "libhdf5" in f[1] and f[0]:
            return f[0]
    return "libhdf5"


def main():
    lines = open(sys.argv[1], errors="replace").read().splitlines()
    reports = [i for i, l in enumerate(lines) if REPORT.search(l)]
    if not reports:
        print("ours: no sanitizer report found in the log")
        return 1
    first = lines[reports[0]]
    if "runtime error" in first or first.startswith("fuzz_"):
        print("ours: " + first.strip())
        return 1
    # A leak report lists several allocation stacks: each must be HDF5's.
    blocks = [i for i, l in enumerate(lines) if re.match(r"(Direct|Indirect) leak of", l)] or [reports[0]]
    # Memory errors: the memory must also be HDF5's own (an overflow of a
    # buffer we allocated, found inside HDF5's memcpy, is ours).
    blocks += [i for i, l in enumerate(lines) if re.match(r"(allocated|previously allocated) by thread", l)]
    where = []
    for start in blocks:
        module, func = culprit(lines[start + 1:])
        if module is None or "libhdf5" not in module:
            print("ours: %s (first frame: %s %s)" % (first.strip(), func, module))
            return 1
        where.append(named_hdf5_frame(lines[start + 1:]))
    print("hdf5: %s in %s" % (first.strip(), ", ".join(sorted(set(where)))))
    return 0


if __name__ == "__main__":
    sys.exit(main())
