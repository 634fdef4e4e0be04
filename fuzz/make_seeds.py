#!/usr/bin/python3
"""Writes the seed corpora of the fuzz targets, and the HDF5 regression
inputs that are easier to describe than to commit as binaries.

usage: /usr/bin/python3 make_seeds.py OUTDIR

OUTDIR/pipeline_file/   valid pipeline files: the demo pipeline and one per
                        stage type, some with "#--set" override lines
OUTDIR/frame_source/    small valid hologram files (h5py): uint8, uint16,
                        float32 stacks of 2-3 frames of 16x16, chunked,
                        compressed, big-endian, one frame, with attributes
OUTDIR/frame_source_regressions/
                        crafted and damaged files that once broke the
                        reader or that libhdf5 mishandles harmlessly
                        (REGRESSIONS, PATCHED below); the replay must end
                        in an Error, not a crash
OUTDIR/hdf5_findings/   damaged files on which libhdf5 itself crashes or
                        asks for 4 GiB (HDF5_FINDINGS); for reproducing
                        only, not replayed

Needs Debian's /usr/bin/python3 with numpy and h5py. Files are written
without timestamps, so a run gives the same bytes as the last one.
"""
import os
import sys

import h5py
import numpy as np

HERE = os.path.dirname(os.path.abspath(__file__))
ROOT = os.path.dirname(HERE)


def pattern(n, h, w):
    f, y, x = np.meshgrid(np.arange(n), np.arange(h), np.arange(w), indexing="ij")
    return (131 * f + 17 * y + 3 * x) % 251


def write_h5(path, data, **kw):
    attrs = kw.pop("attrs", {})
    with h5py.File(path, "w", libver="earliest", track_order=False) as f:
        d = f.create_dataset("holograms", data=data, track_times=False, **kw)
        for k, v in attrs.items():
            d.attrs[k] = v


def frame_source_seeds(out):
    os.makedirs(out, exist_ok=True)
    v = pattern(3, 16, 16)
    write_h5(os.path.join(out, "uint8_3x16x16.h5"), v.astype("u1"))
    write_h5(os.path.join(out, "uint16_2x16x16.h5"), (v[:2] * 257).astype("u2"))
    write_h5(os.path.join(out, "float32_3x16x16.h5"), ((v - 125) * 0.25).astype("f4"))
    write_h5(os.path.join(out, "uint16be_2x16x16.h5"), (v[:2] * 257).astype(">u2"))
    write_h5(os.path.join(out, "uint8_16x16.h5"), v[0].astype("u1"))
    write_h5(os.path.join(out, "uint16_chunked_deflate.h5"), (v * 257).astype("u2"),
             chunks=(1, 16, 16), compression="gzip", compression_opts=4, shuffle=True)
    write_h5(os.path.join(out, "float32_chunked_2frames.h5"), ((v - 125) * 0.25).astype("f4"),
             chunks=(2, 8, 16))
    write_h5(os.path.join(out, "uint16_attributes.h5"), (v[:2] * 257).astype("u2"),
             attrs={"wavelength": 632.8e-9, "pixel_pitch": np.array([3.45e-6, 3.45e-6]),
                    "camera": "demo", "frames": np.int64(2)})


# Crafted inputs that reached a bug before it was fixed (fuzz/README.md
# "Findings"): name -> function writing the file.
def huge_chunked_frame(path):
    # A chunked dataset whose chunks were never written: HDF5 reads it as
    # fill values, so a 1 KiB file can claim 16 x 2^40 pixel frames; the
    # reader allocated its conversion buffer for the whole frame.
    with h5py.File(path, "w", libver="earliest") as f:
        f.create_dataset("holograms", shape=(2, 16, 2**40), dtype="u2", chunks=(1, 16, 1024),
                         track_times=False)


def overflowing_frame(path):
    # h * w overflows 64 bits: the byte counts wrapped to small numbers.
    with h5py.File(path, "w", libver="earliest") as f:
        f.create_dataset("holograms", shape=(2**33, 2**33), dtype="u1", chunks=(16, 16),
                         track_times=False)


REGRESSIONS = {
    "huge_chunked_frame.h5": huge_chunked_frame,
    "overflowing_frame.h5": overflowing_frame,
}

# Single-byte damage to a seed, found by fuzz_frame_source and the byte
# sweeps of fuzz/README.md: (file, seed, sha256 prefix of the seed, offset,
# new byte, what happened). Offsets are those of the seeds as this h5py and
# libhdf5 write them; with another version the seed's hash differs and the
# entry is skipped (a message says so).
PATCHED = [
    # Integer type of precision 65288 bits in 1-byte elements: HDF5's type
    # conversion overran its stack (stack smashing in H5T__bit_get_d). Now
    # refused before reading (detail::damaged_layout).
    ("damaged_type_precision.h5", "uint8_3x16x16.h5", "2f8a724a1feb99be", 899, 0xFF, "ours, fixed"),
    # Damaged layout message: H5Dopen fails ("chunk size must be < 4GB")
    # and leaks (tests/sanitizer/lsan.supp).
    ("damaged_layout.h5", "float32_chunked_2frames.h5", "620427267b71e737", 950, 0xFF, "hdf5 leak, suppressed"),
]

# libhdf5's own failures on damaged files: written to OUTDIR/hdf5_findings/
# to reproduce them, never replayed, since nothing on our side can stop
# them (fuzz/README.md "Findings").
HDF5_FINDINGS = [
    # A chunk record claiming 4 GiB: HDF5 mallocs that much in H5Dread before
    # it fails to read it (libFuzzer: out-of-memory; ASan takes ~30 s to
    # poison the shadow of such a block, so it is not replayed).
    ("huge_chunk_record.h5", "float32_chunked_2frames.h5", "620427267b71e737", 1571, 0xFF, "4 GiB malloc"),
    # The next two are read by `wavestack inspect` (attributes), not by `run`.
    # Dataspace message of an attribute with version 0xdb: H5Aiterate2
    # fails and then closes attributes it never initialised (SEGV in
    # H5A__close under ASan, whose malloc fills memory with 0xbe).
    ("attribute_dataspace_version.h5", "uint16_attributes.h5", "d61c01d86ecb2c2a", 1608, 0xDB, "SEGV H5A__close"),
    # Global-heap object of a variable-length string attribute with a damaged
    # length: H5HG_read copies ~2^64 bytes (memcpy-param-overlap under ASan).
    ("attribute_heap_length.h5", "uint16_attributes.h5", "d61c01d86ecb2c2a", 3102, 0xFF, "memcpy in H5HG_read"),
]


def write_patched(entries, seeds, out):
    import hashlib
    os.makedirs(out, exist_ok=True)
    for name, seed, digest, offset, value, _ in entries:
        data = bytearray(open(os.path.join(seeds, seed), "rb").read())
        if not hashlib.sha256(data).hexdigest().startswith(digest):
            print("make_seeds.py: %s is not the file the offsets were found on (another h5py or "
                  "libhdf5?); %s skipped" % (seed, name), file=sys.stderr)
            continue
        data[offset] = value
        with open(os.path.join(out, name), "wb") as f:
            f.write(bytes(data))


def pipeline_seeds(out):
    os.makedirs(out, exist_ok=True)
    with open(os.path.join(ROOT, "datasets-demo", "demo-pipeline.toml")) as f:
        demo = f.read()
    seeds = {"demo.toml": demo}
    head = ('[input]\npath = "data/holograms.h5"\ndataset = "/holograms"\nframes = "0:10:2"\n'
            'background = "data/background.h5:/holograms"\n\n'
            '[instrument]\nprofile = "../calibration/demo-40x-0.75na.toml"\n\n')
    inline = ('[input]\npath = "holo.h5"\n\n[instrument]\nwavelength = "532 nm"\npixel_pitch = "5.5 um"\n'
              'magnification = 20.0\nnumerical_aperture = 0.4\nmedium_index = 1.0\n'
              'carrier = { fx = 0.3, fy = -0.25 }\n\n')
    tail = ('\n[output]\npath = "out/result.h5"\nproducts = ["phase", "opd", "height"]\nheight = "transmission"\n'
            'index_difference = 0.04\ncompression = "deflate"\nlevel = 6\npreviews = 5\n\n'
            '[run]\nthreads = 2\nframes_in_flight = 4\nfft_planning = "estimate"\nfft_wisdom = "none"\n')
    front = '[[stage]]\ntype = "fringe"\ndc = "local"\napodize = "tukey"\ntukey_fraction = 0.2\n\n' \
            '[[stage]]\ntype = "sideband"\norder = "auto"\nradius = 0.3\nsoft_edge = 0.1\n\n'
    stages = {
        "propagate_stack": '[[stage]]\ntype = "propagate"\ndistances = { from = "-5 um", to = "5 um", step = "1 um" }\n'
                           'method = "angular-spectrum"\npadding = 1.5\n',
        "propagate_list": '[[stage]]\ntype = "propagate"\ndistances = ["-2 um", "0 um", "3.5 um"]\nmethod = "fresnel"\n',
        "autofocus": '[[stage]]\ntype = "autofocus"\nfrom = "-10 um"\nto = "10 um"\nstep = "0.5 um"\n'
                     'metric = "auto"\nroi = [0, 0, 64, 64]\ntrack = true\nwindow = 8\nrefine_levels = 5\n\n'
                     '[[stage]]\ntype = "propagate"\ndistance = "focus"\n',
        "unwrap_ls": '[[stage]]\ntype = "unwrap"\nmethod = "least-squares"\nweights = "amplitude"\n'
                     'wrap_around = "x"\ncontinuity = "none"\nresidue_warning = 0.01\n',
        "reference": '[[stage]]\ntype = "reference"\ndivide = "phase"\namplitude_floor = 0.1\n\n'
                     '[[stage]]\ntype = "unwrap"\n\n[[stage]]\ntype = "flatten"\nmodel = "zernike"\nterms = [1, 2, 4]\n'
                     'region = "auto"\n',
        "zernike": '[[stage]]\ntype = "unwrap"\nmask = "mask.h5:/mask"\n\n[[stage]]\ntype = "flatten"\n'
                   'model = "polynomial"\ndegree = 3\nregion = "mask"\nmask = "bg.h5"\n\n'
                   '[[stage]]\ntype = "zernike"\nterms = 21\ncenter_row = 32\ncenter_column = 32\nradius = 30\n',
        "drymass": '[[stage]]\ntype = "unwrap"\n\n[[stage]]\ntype = "drymass"\nthreshold = "otsu"\nsigmas = 4\n'
                   'min_area_pixels = 10\nfill_holes = true\nexclude_border = false\nalpha = 0.2\n',
    }
    for i, (name, body) in enumerate(sorted(stages.items())):
        seeds[name + ".toml"] = (head if i % 2 == 0 else inline) + front + body + tail
    seeds["overrides.toml"] = ('#--set output.path=other.h5\n#--set stage.2.distance=3 um\n'
                               '#--set input.frames=1:\n#--set run.threads=1\n') + demo
    for name, text in seeds.items():
        with open(os.path.join(out, name), "w") as f:
            f.write(text)


def main():
    if len(sys.argv) != 2:
        sys.exit(__doc__)
    out = sys.argv[1]
    pipeline_seeds(os.path.join(out, "pipeline_file"))
    frame_source_seeds(os.path.join(out, "frame_source"))
    reg = os.path.join(out, "frame_source_regressions")
    os.makedirs(reg, exist_ok=True)
    for name, make in REGRESSIONS.items():
        make(os.path.join(reg, name))
    write_patched(PATCHED, os.path.join(out, "frame_source"), reg)
    write_patched(HDF5_FINDINGS, os.path.join(out, "frame_source"), os.path.join(out, "hdf5_findings"))


if __name__ == "__main__":
    main()
