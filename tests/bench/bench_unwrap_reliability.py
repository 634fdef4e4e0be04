#!/usr/bin/python3
"""Companion of bench_unwrap_reliability.cpp: times scikit-image's
reliability-sorting unwrapper on the same frame (run with /usr/bin/python3).

  bench_unwrap_reliability.py IN OUT H W REPEATS

IN is a raw little-endian float32 H x W wrapped phase map written by the C++
benchmark; the unwrapped result (float32) goes to OUT. Prints one line
"skimage_seconds <best of REPEATS>" with the best wall time of
skimage.restoration.unwrap_phase (seed fixed), including its conversion of
the float32 input to float64, as a user calling it on the same array would
see it.
"""
import sys
import time

import numpy as np
from skimage.restoration import unwrap_phase


def main(argv):
    if len(argv) != 6:
        print(__doc__, file=sys.stderr)
        return 2
    h, w, repeats = int(argv[3]), int(argv[4]), int(argv[5])
    wrapped = np.fromfile(argv[1], dtype="<f4").reshape(h, w)
    best = float("inf")
    out = None
    for _ in range(repeats):
        t0 = time.perf_counter()
        out = unwrap_phase(wrapped, seed=0)
        best = min(best, time.perf_counter() - t0)
    np.ascontiguousarray(out, dtype="<f4").tofile(argv[2])
    print("skimage_seconds %.6f" % best)
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv))
