#!/usr/bin/python3
"""Run the bad-input corpus (corpus.py) against a wavestack binary and check,
for every case:

  * no crash: no death by a signal, no "AddressSanitizer" / "runtime error" /
    "LeakSanitizer" in stderr;
  * the documented exit status;
  * exactly one error line, starting "wavestack: error:", holding every word
    of the case (other stderr lines may only be warnings);
  * nothing at the output path; a "<output>.partial" beside it only when the
    error line says it is kept for --resume;
  * every input file of the case byte-identical afterwards (SHA-256);
  * peak memory (the child's own, from wait4) below MAX_RSS_MB;
  * cases expected to succeed (exit 0): a warning line with the case's words
    and the case's checks of the output file.

usage: /usr/bin/python3 run_badinput.py WAVESTACK [--group G]... [--keep DIR] [-k SUBSTRING] [--show]
Prints "N cases passed" (and skipped ones with the reason); on a failure the
case, command, exit status and stderr. Exit 1 when any case fails.
"""
from __future__ import annotations

import argparse
import concurrent.futures
import os
import resource
import shutil
import signal
import subprocess
import sys
import tempfile
import threading

import corpus

TIMEOUT = 120  # s per case; a hang is a failure
# Peak memory of one run on 64x64 frames, generous for AddressSanitizer's
# shadow memory: a refusal that allocates a declared 10^10-pixel frame first
# (or any runaway allocation) goes far above it.
MAX_RSS_MB = 1500


def digests(folder):
    out = {}
    for base, _, files in os.walk(folder):
        for f in files:
            p = os.path.join(base, f)
            if os.path.isfile(p) and not os.path.islink(p):
                out[os.path.relpath(p, folder)] = corpus.cc.digest(p)
    return out


def mount(kind, where):
    """A small tmpfs at `where` (kind "tmpfs") or a read-only one ("ro");
    None when mounting is not permitted here."""
    os.makedirs(where, exist_ok=True)
    opts = "size=64k" if kind == "tmpfs" else "ro,size=64k"
    r = subprocess.run(["mount", "-t", "tmpfs", "-o", opts, "tmpfs", where], capture_output=True, text=True)
    return None if r.returncode else where


def unmount(where):
    subprocess.run(["umount", where], capture_output=True)


def run_case(binary, case, d):
    """Returns (status, detail): status "pass" | "fail" | "skip"."""
    os.makedirs(d, exist_ok=True)
    case.make(d)
    before = digests(d)
    mounted = None
    if case.mount:
        mounted = mount(case.mount, os.path.join(d, "mnt"))
        if not mounted:
            return "skip", "mounting a tmpfs is not permitted here"
    args = [a.replace("{d}", d) for a in case.args]
    cmd = [binary, *args]
    if case.as_nobody:
        if os.geteuid() != 0 or not shutil.which("setpriv"):
            return "skip", "needs root and setpriv to run as nobody"
        nobody = ["setpriv", "--reuid=nobody", "--regid=nogroup", "--clear-groups"]
        for p in [d, os.path.dirname(d)]:  # the case folder and the corpus root, both ours
            os.chmod(p, os.stat(p).st_mode | 0o755)
        for base, dirs, files in os.walk(d):
            for f in files:
                os.chmod(os.path.join(base, f), 0o644)
        if subprocess.run([*nobody, "test", "-r", os.path.join(d, "p.toml")], capture_output=True).returncode:
            return "skip", "user nobody cannot reach the case folder"
        cmd = [*nobody, *cmd]
    env = dict(os.environ, WAVESTACK_FFT_PLANNING="estimate", XDG_CACHE_HOME=os.path.join(d, "cache"))
    env.update(case.env)

    def limits():
        resource.setrlimit(resource.RLIMIT_FSIZE, (case.fsize, case.fsize))

    # stderr to a file and wait4() for the child's own peak memory
    timed_out = threading.Event()
    with open(os.path.join(d, ".stderr"), "w+", errors="replace") as ef:
        p = subprocess.Popen(cmd, stdin=subprocess.DEVNULL, stdout=subprocess.DEVNULL, stderr=ef, env=env, cwd=d,
                             preexec_fn=limits if case.fsize else None)
        timer = threading.Timer(TIMEOUT, lambda: (timed_out.set(), p.kill()))
        timer.start()
        _, status, usage = os.wait4(p.pid, 0)
        timer.cancel()
        p.returncode = code = os.waitstatus_to_exitcode(status)
        ef.seek(0)
        err = ef.read()
    os.remove(os.path.join(d, ".stderr"))
    rss_mb = usage.ru_maxrss / 1024  # kB on Linux
    problems = []
    out_path = case.output if os.path.isabs(case.output) else os.path.join(d, case.output)
    leftover_partial = os.path.exists(out_path + ".partial")
    existed = os.path.relpath(out_path, d) in before  # e.g. the input itself: then it must be unchanged
    leftover_output = os.path.exists(out_path) and case.code != 0 and not existed
    if mounted:
        unmount(mounted)
    if timed_out.is_set():
        problems.append(f"no exit within {TIMEOUT} s")
    elif code < 0:
        problems.append(f"killed by signal {signal.Signals(-code).name}")
    for bad in ("AddressSanitizer", "LeakSanitizer", "runtime error:", "Segmentation fault", "terminate called"):
        if bad in err:
            problems.append(f"stderr shows {bad!r}")
    if rss_mb > MAX_RSS_MB:
        problems.append(f"peak memory {rss_mb:.0f} MB, more than {MAX_RSS_MB} MB for a run on tiny frames")
    if code != case.code:
        problems.append(f"exit status {code}, expected {case.code}")
    lines = [x for x in err.splitlines() if x.strip()]
    errors = [x for x in lines if x.startswith("wavestack: error:")]
    others = [x for x in lines if not x.startswith("wavestack: error:") and not x.startswith("warning: ")]
    if others:
        problems.append(f"stderr lines that are neither the error nor a warning: {others[:3]}")
    if case.code != 0:
        if len(errors) != 1:
            problems.append(f"{len(errors)} lines start with 'wavestack: error:', expected one")
        line = errors[0] if errors else ""
        missing = [w.replace("{d}", d) for w in case.words if w.replace("{d}", d) not in line]
        if missing:
            problems.append(f"the error line lacks {missing}")
        if leftover_output:
            problems.append(f"a file was left at the output path {out_path}")
        if leftover_partial and "--resume" not in line:
            problems.append(f"{out_path}.partial was left but the message does not say it is kept for --resume")
        prev = os.path.splitext(out_path)[0] + "_previews"
        if os.path.isdir(prev) and os.listdir(prev):
            problems.append("previews of the failed run were left")
    else:
        if errors:
            problems.append(f"an error line in a run that should succeed: {errors[0]}")
        warns = [x for x in lines if x.startswith("warning: ")]
        repeated = sorted({x for x in warns if warns.count(x) > 1})
        if repeated:  # e.g. the first frame's warning, once from planning and once from the run
            problems.append(f"warnings printed more than once: {repeated[:3]}")
        for w in case.words:
            if not any(w in x for x in warns):
                problems.append(f"no warning line mentions {w!r}")
        if leftover_partial:
            problems.append(f"{out_path}.partial was left by a run that succeeded")
        if case.success_check and code == 0:
            problems += case.success_check(d)
    after = digests(d)
    changed = [k for k, v in before.items() if after.get(k) != v]
    if changed:
        problems.append(f"input files changed or vanished: {changed}")
    shown = errors[0] if errors else "; ".join(x for x in lines if x.startswith("warning: "))
    if problems:
        detail = ("\n    ".join(problems) + f"\n  command: {' '.join(cmd)}\n  exit status: {code}\n  stderr:\n" +
                  "\n".join("    " + x for x in err.splitlines()))
        return "fail", detail
    return "pass", shown


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("binary")
    ap.add_argument("--group", action="append", help="only cases of this group (files, frames, pipeline, cli, output)")
    ap.add_argument("-k", help="only cases whose name contains this")
    ap.add_argument("--keep", help="make the case folders here and keep them")
    ap.add_argument("--jobs", type=int, default=2)
    ap.add_argument("--show", action="store_true", help="print every case's message")
    a = ap.parse_args()
    binary = os.path.abspath(a.binary)
    chosen = [c for c in corpus.cases() if (not a.group or c.group in a.group) and (not a.k or a.k in c.name)]
    root = a.keep or tempfile.mkdtemp(prefix="badinput-")
    os.makedirs(root, exist_ok=True)
    results = {}
    try:
        with concurrent.futures.ThreadPoolExecutor(a.jobs) as pool:
            futures = {pool.submit(run_case, binary, c, os.path.join(root, f"{i:02d}")): (i, c)
                       for i, c in enumerate(chosen)}
            for fut in concurrent.futures.as_completed(futures):
                i, c = futures[fut]
                try:
                    results[i] = fut.result()
                except Exception as e:  # a broken case generator is a failure too
                    results[i] = ("fail", f"the runner failed: {e!r}")
    finally:
        if not a.keep:
            for base, dirs, _ in os.walk(root):  # a failed case may have left a read-only folder or a mount
                for x in dirs:
                    p = os.path.join(base, x)
                    if os.path.ismount(p):
                        unmount(p)
            shutil.rmtree(root, ignore_errors=True)
    passed = failed = 0
    for i, c in enumerate(chosen):
        status, detail = results[i]
        if status == "pass":
            passed += 1
            if a.show:
                print(f"ok   {c.name} (exit {c.code}): {detail.replace(root, '$D')}")
        elif status == "skip":
            print(f"SKIP {c.name}: {detail}")
        else:
            failed += 1
            print(f"FAIL {c.name}\n    {detail}")
    skipped = len(chosen) - passed - failed
    print(f"{passed} cases passed, {failed} failed" + (f", {skipped} skipped" if skipped else ""))
    sys.exit(1 if failed else 0)


if __name__ == "__main__":
    main()
