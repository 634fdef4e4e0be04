#!/usr/bin/python3
"""Checks a FrameSink output file against the output-file contract of
DESIGN.md ("Output file", format_version 1), reading it with h5py: the
independent reader users' scripts rely on.

usage: check_output.py FILE MODE N H W [LEVEL]
    MODE: "plain" (no compression) or "deflate" (shuffle + deflate LEVEL)

The expected pixel values use the formulas of tests/io/test_frame_sink.cpp
(sink_values). Exits 0 when everything matches, 1 with a list of
mismatches otherwise.
"""
import re
import sys

import h5py
import numpy as np

PIPELINE = '[input]\npath = "holograms.h5"\ndataset = "/holograms"\n\n[[stage]]\ntype = "fringe"\n'
DY, DX = 86.25e-9, 90e-9
WAVELENGTH, MEDIUM, PLANE = 632.8e-9, 1.333, 12.5e-6
S = 5  # focus sweep length

errors = []


def check(cond, what):
    if not cond:
        errors.append(what)


def expected(n, h, w):
    f, y, x = np.meshgrid(np.arange(n), np.arange(h), np.arange(w), indexing="ij")
    amplitude = 1 + 0.01 * (y + 2 * x) + f
    phase = (x - w / 2) * 0.01 - (y - h / 2) * 0.02 + 0.1 * f
    field = amplitude * np.exp(1j * phase)
    opd = 50 * np.sin(12.9898 * x + 78.233 * y + 3.1 * f)
    return field, amplitude, phase, opd


def attr_str(obj, name):
    v = obj.attrs.get(name)
    return v.decode() if isinstance(v, bytes) else v


def main():
    path, mode, n, h, w = sys.argv[1], sys.argv[2], int(sys.argv[3]), int(sys.argv[4]), int(sys.argv[5])
    level = int(sys.argv[6]) if len(sys.argv) > 6 else 0
    f = h5py.File(path, "r")

    # root attributes
    check(attr_str(f, "format") == "wavestack", "format attribute")
    check(f.attrs.get("format_version") == 1 and np.issubdtype(np.asarray(f.attrs["format_version"]).dtype, np.integer),
          "format_version must be the integer 1")
    check(isinstance(attr_str(f, "software_version"), str) and attr_str(f, "software_version"), "software_version")
    check(re.fullmatch(r"\d{4}-\d\d-\d\dT\d\d:\d\d:\d\dZ", attr_str(f, "created") or "") is not None,
          "created must be ISO 8601 UTC, got %r" % attr_str(f, "created"))
    check(attr_str(f, "pipeline") == PIPELINE, "pipeline text differs: %r" % attr_str(f, "pipeline"))
    check(attr_str(f, "source_file") == "holograms.h5", "source_file")
    check(attr_str(f, "source_dataset") == "/holograms", "source_dataset")
    check(attr_str(f, "warnings") == "carrier close to the edge", "extra string attribute")
    check(f.attrs.get("sideband_radius") == 0.33, "extra double attribute")

    field, amplitude, phase, opd = expected(n, h, w)
    images = {"field": (np.complex64, field, "1"), "amplitude": (np.float32, amplitude, "1"),
              "phase": (np.float32, phase, "rad"), "opd": (np.float32, opd, "nm")}
    if mode == "deflate":
        images["check/opd_filtered"] = (np.float32, opd, "nm")
    for name, (dtype, values, units) in images.items():
        if name not in f:
            errors.append("missing /" + name)
            continue
        d = f[name]
        check(d.dtype == dtype, "/%s dtype %s, expected %s" % (name, d.dtype, np.dtype(dtype)))
        check(d.shape == (n, h, w), "/%s shape %s" % (name, d.shape))
        check(d.chunks == (1, h, w), "/%s chunks %s, expected one frame" % (name, d.chunks))
        check(attr_str(d, "units") == units, "/%s units %r" % (name, attr_str(d, "units")))
        check(np.array_equal(d.attrs.get("pixel_pitch"), [DY, DX]), "/%s pixel_pitch %r" % (name, d.attrs.get("pixel_pitch")))
        check(d.attrs.get("wavelength") == WAVELENGTH, "/%s wavelength" % name)
        check(d.attrs.get("medium_index") == MEDIUM, "/%s medium_index" % name)
        if name == "phase":
            check("plane" not in d.attrs, "/phase must not carry plane (record_plane = false)")
            check(d.attrs.get("wrapped") == 1, "/phase wrapped attribute")
        else:
            check(d.attrs.get("plane") == PLANE, "/%s plane" % name)
        data = d[()]
        # float32 storage of double-precision formulas: relative 1e-6 is a
        # few float32 ulps (2^-23 = 1.2e-7)
        check(np.allclose(data, values, rtol=1e-6, atol=1e-5), "/%s values differ (max %g)" % (
            name, np.max(np.abs(data - values))))
        if mode == "deflate":
            check(d.compression == "gzip" and d.compression_opts == level and d.shuffle,
                  "/%s compression %s/%s shuffle %s" % (name, d.compression, d.compression_opts, d.shuffle))
        else:
            check(d.compression is None and not d.shuffle, "/%s must not be compressed" % name)

    if mode == "deflate":
        # Chunks compressed by wavestack (direct chunk write) must be
        # byte-identical to chunks compressed by HDF5's own filters.
        a, b = f["opd"], f["check/opd_filtered"]
        for i in range(n):
            ma, ca = a.id.read_direct_chunk((i, 0, 0))
            mb, cb = b.id.read_direct_chunk((i, 0, 0))
            check(ma == 0 and mb == 0, "filter masks %d %d" % (ma, mb))
            check(ca == cb, "frame %d: direct chunk differs from HDF5's filter output (%d vs %d bytes)" % (
                i, len(ca), len(cb)))
            check(len(ca) < h * w * 4 * 1.01, "frame %d: compressed chunk too large" % i)

    # per-frame tables
    idx, done, dist = f["frames/index"], f["frames/done"], f["focus/distance"]
    check(idx.dtype == np.int64 and idx.shape == (n,), "/frames/index type/shape")
    check(done.dtype == np.uint8 and done.shape == (n,), "/frames/done type/shape")
    check(dist.dtype == np.float64 and dist.shape == (n,), "/focus/distance type/shape")
    check(np.array_equal(idx[()], 10 + 2 * np.arange(n)), "/frames/index values %r" % idx[()])
    check(np.array_equal(done[()], np.ones(n)), "/frames/done values %r" % done[()])
    check(np.allclose(dist[()], (np.arange(n) - 1) * 2.5e-6, rtol=0, atol=1e-15), "/focus/distance values")
    check(attr_str(dist, "units") == "m", "/focus/distance units")
    sweep = f["focus/distances"]
    check(sweep.shape == (S,) and sweep.dtype == np.float64, "/focus/distances")
    check(np.allclose(sweep[()], -5e-6 + 2.5e-6 * np.arange(S)), "/focus/distances values")
    curve = f["focus/curve"]
    check(curve.shape == (n, S) and curve.dtype == np.float64, "/focus/curve")
    check(np.allclose(curve[()], np.arange(n)[:, None] * 10 + np.arange(S)[None, :]), "/focus/curve values")

    # every dataset has a units attribute
    def visit(name, obj):
        if isinstance(obj, h5py.Dataset):
            check("units" in obj.attrs, "/%s has no units attribute" % name)
    f.visititems(visit)

    if errors:
        print("\n".join(errors))
        return 1
    print("ok")
    return 0


if __name__ == "__main__":
    sys.exit(main())
