#!/usr/bin/python3
"""Read a z-stack/table file written by test_frame_sink_stack.cpp with h5py
(the outside reference) and check shapes, chunks, values and the table.
usage: check_stack_table.py FILE LEVEL   (LEVEL 0 = uncompressed)"""
import sys

import h5py
import numpy as np

path, level = sys.argv[1], int(sys.argv[2])
bad = []
n, z, h, w = 2, 3, 4, 5
f_, p_, y_, x_ = np.meshgrid(np.arange(n), np.arange(z), np.arange(h), np.arange(w), indexing="ij")
expected = ((1000 * f_ + 100 * p_ + 10 * y_ + x_) * 0.5).astype(np.float32)
with h5py.File(path, "r") as f:
    a, c = f["amplitude"], f["field"]
    if a.shape != (n, z, h, w) or c.shape != (n, z, h, w):
        bad.append(f"shapes {a.shape} {c.shape}")
    if a.chunks != (1, z, h, w) or c.chunks != (1, z, h, w):
        bad.append(f"chunks {a.chunks} {c.chunks}")
    if c.dtype != np.complex64:
        bad.append(f"field dtype {c.dtype}")
    if level and not (a.compression == "gzip" and a.shuffle):
        bad.append("compression filters missing")
    if not np.array_equal(a[...], expected):
        bad.append("amplitude values")
    if not np.array_equal(c[...], expected - 1j * expected):
        bad.append("field values")
    t = f["objects"][...]
    if list(t.dtype.names) != ["frame", "id", "area"]:
        bad.append(f"table columns {t.dtype.names}")
    if t["frame"].tolist() != [0, 0, 1] or t["id"].tolist() != [1, 2, 1] or t["area"].tolist() != [2.5, 3.5, 4.5]:
        bad.append(f"table values {t}")
    if t.dtype["frame"] != np.int64 or f["objects"].attrs["units"] != "1,1,um^2":
        bad.append("table types/units")
for b in bad:
    print("FAIL:", b)
sys.exit(1 if bad else 0)
