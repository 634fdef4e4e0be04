#!/usr/bin/python3
"""Checks a raw stack written by io::StackWriter (tests/io/test_stack_writer.cpp)
with h5py.

usage: check_stack.py FILE
Expected: /holograms (4,33,47) uint16, v = (7 f + 3 y + x) * 11, chunk one
frame, attrs units="counts", exposure=0.002, frames=4 (int64); root attr
generator="test"; /background (33,47) float32, v = 0.5 y - 0.25 x, gzip 3 with
shuffle. Exits 1 with the mismatches otherwise.
"""
import sys

import h5py
import numpy as np


def main():
    errors = []

    def check(cond, what):
        if not cond:
            errors.append(what)

    f = h5py.File(sys.argv[1], "r")
    d = f["holograms"]
    fi, y, x = np.meshgrid(np.arange(4), np.arange(33), np.arange(47), indexing="ij")
    check(d.dtype == np.uint16, "dtype %s" % d.dtype)
    check(d.shape == (4, 33, 47), "shape %s" % (d.shape,))
    check(d.chunks == (1, 33, 47), "chunks %s" % (d.chunks,))
    check(np.array_equal(d[()], (7 * fi + 3 * y + x) * 11), "holograms values")
    check(d.attrs.get("units") == "counts", "units")
    check(d.attrs.get("exposure") == 0.002, "exposure")
    check(d.attrs.get("frames") == 4 and d.attrs["frames"].dtype == np.int64, "frames attribute")
    check(f.attrs.get("generator") == "test", "generator")
    b = f["background"]
    check(b.dtype == np.float32 and b.shape == (33, 47), "background type/shape")
    check(b.compression == "gzip" and b.compression_opts == 3 and b.shuffle, "background compression")
    check(np.array_equal(b[()], (0.5 * y[0] - 0.25 * x[0]).astype(np.float32)), "background values")
    if errors:
        print("\n".join(errors))
        return 1
    return 0


if __name__ == "__main__":
    sys.exit(main())
