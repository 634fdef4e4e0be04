#!/usr/bin/python3
"""Reference percentiles for render::robust_range, computed by numpy.

usage: percentile_reference.py H W LOW HIGH
Data (shared with tests/render/test_preview.cpp, test_data()):
    v[i] = float32(sin(0.37 i) * (i mod 17) + 0.01 i), NaN where i mod 23 == 0,
for i = 0 .. H*W-1 in row-major order. Prints the LOW and HIGH percentiles
of the non-NaN values (numpy.nanpercentile, default "linear" method) as
two numbers on one line, computed in float64.
"""
import sys

import numpy as np


def main():
    h, w, lo, hi = int(sys.argv[1]), int(sys.argv[2]), float(sys.argv[3]), float(sys.argv[4])
    i = np.arange(h * w, dtype=np.float64)
    v = (np.sin(0.37 * i) * (np.arange(h * w) % 17) + 0.01 * i).astype(np.float32).astype(np.float64)
    v[np.arange(h * w) % 23 == 0] = np.nan
    p = np.nanpercentile(v, [lo, hi])
    print("%.17g %.17g" % (p[0], p[1]))
    return 0


if __name__ == "__main__":
    sys.exit(main())
