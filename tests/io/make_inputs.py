#!/usr/bin/python3
"""Writes the HDF5 inputs the FrameSource tests read, with h5py (an outside
writer, so the reader is checked against files it did not produce itself).

usage: make_inputs.py OUTDIR

Pixel values follow one formula shared with tests/io/test_frame_source.cpp:
    v(f, y, x) = (131 f + 17 y + 3 x) mod 251
scaled per type (see SCALE). Exits non-zero on any failure.
"""
import os
import sys

import h5py
import numpy as np

N, H, W = 3, 37, 53  # non-power-of-two frames on purpose


def pattern(n, h, w):
    f, y, x = np.meshgrid(np.arange(n), np.arange(h), np.arange(w), indexing="ij")
    return (131 * f + 17 * y + 3 * x) % 251


# name -> (numpy dtype, function of v giving the stored value)
SCALE = {
    "uint8": ("u1", lambda v: v),
    "int8": ("i1", lambda v: v - 125),
    "uint16": ("u2", lambda v: v * 257),
    "int16": ("i2", lambda v: (v - 125) * 257),
    "uint32": ("u4", lambda v: v * 16411 + 1000000),
    "int32": ("i4", lambda v: (v - 125) * 16411),
    "uint64": ("u8", lambda v: v * 16411 + 3000000),
    "int64": ("i8", lambda v: (v - 125) * 16411 - 1000),
    "float32": ("f4", lambda v: (v - 125) * 0.25),
    "float64": ("f8", lambda v: (v - 125) * 0.1),
    "uint16be": (">u2", lambda v: v * 257),
    "float32be": (">f4", lambda v: (v - 125) * 0.25),
}


def main():
    out = sys.argv[1]
    v = pattern(N, H, W)
    for i, (name, (dt, fn)) in enumerate(SCALE.items()):
        with h5py.File(os.path.join(out, "dtype_%s.h5" % name), "w") as f:
            data = fn(v.astype(np.float64) if dt.endswith("f8") or dt.endswith("f4") else v.astype(np.int64))
            # alternate layouts: contiguous, chunked per frame, chunked+gzip
            kw = [{}, {"chunks": (1, H, W)}, {"chunks": (1, H, W), "compression": "gzip", "shuffle": True}][i % 3]
            f.create_dataset("frames", data=np.asarray(data).astype(dt), **kw)

    # A camera-sized stack: 3 frames of 1200x1920 uint16.
    with h5py.File(os.path.join(out, "big_uint16.h5"), "w") as f:
        f.create_dataset("frames", data=(pattern(3, 1200, 1920) * 257).astype("u2"), chunks=(1, 1200, 1920))

    # Chunks spanning several frames and half a frame, compressed.
    with h5py.File(os.path.join(out, "multichunk.h5"), "w") as f:
        f.create_dataset("frames", data=(pattern(10, 40, 48) * 257).astype("u2"), chunks=(5, 20, 48),
                         compression="gzip", shuffle=True)

    # One frame as a rank-2 dataset, with attributes of several kinds.
    with h5py.File(os.path.join(out, "rank2.h5"), "w") as f:
        d = f.create_dataset("image", data=((pattern(1, 40, 48)[0] - 125) * 0.1).astype("f8"))
        d.attrs["exposure_time"] = 0.004
        d.attrs["camera"] = "test camera"
        d.attrs["binning"] = np.int32(2)
        d.attrs["roi"] = np.array([0, 0, 40, 48], dtype=np.int32)
        d.attrs["label_fixed"] = np.bytes_(b"fixed")
        f.attrs["instrument"] = "bench 1"

    # Datasets FrameSource must refuse, and enough of them that a listing of
    # the file is shortened.
    with h5py.File(os.path.join(out, "bad.h5"), "w") as f:
        f.create_dataset("rank1", data=np.zeros(100, "u2"))
        f.create_dataset("rank4", data=np.zeros((2, 3, 32, 32), "u2"))
        f.create_dataset("empty", shape=(0, 32, 32), dtype="u2")
        f.create_dataset("small", data=np.zeros((3, 8, 8), "u2"))
        f.create_dataset("narrow", data=np.zeros((3, 64, 10), "u2"))
        f.create_dataset("strings", shape=(2, 32, 32), dtype=h5py.string_dtype())
        f.create_dataset("complex", data=np.zeros((2, 32, 32), np.complex64))
        f.create_dataset("half", data=np.zeros((2, 32, 32), np.float16))
        f.create_dataset("flags", data=np.zeros((2, 32, 32), bool))
        f.create_dataset("scalar", data=1.5)
        f.create_dataset("group/inner", data=np.zeros((2, 32, 32), "u2"))
        for k in range(3):
            f.create_dataset("extra_%02d" % k, data=np.zeros((1, 16, 16), "u1"))

    with open(os.path.join(out, "not_hdf5.h5"), "w") as f:
        f.write("this is a text file, not HDF5\n")
    return 0


if __name__ == "__main__":
    sys.exit(main())
