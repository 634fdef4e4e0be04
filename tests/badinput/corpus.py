#!/usr/bin/python3
"""The bad-input corpus of wavestack ("robust batches": bad input gets a clear
error and loses nothing). Every case is generated here, at test time, into a
folder of its own; nothing binary is checked in.

A case is: the files to make, the command line, the exit status README.md
documents for it (0 ok, 2 bad command line or pipeline file, 3 bad input
data, 4 output not written, 1 anything else) and the words its one error
line must contain. Cases that must still run (blank or saturated frames)
expect exit 0 and a warning naming the frame instead.

usage: /usr/bin/python3 corpus.py OUTDIR   writes every case's files and
       OUTDIR/cases.txt (name, expected status, command) for a look by hand.
run_badinput.py runs and checks the corpus.

Holograms are the off-axis model of tests/reference/offaxis_reference.py
(Takeda 1982), made by check_contract.make_input on tiny 64x64 frames.
"""
from __future__ import annotations

import functools
import os
import shutil
import sys
import tempfile
import threading
from dataclasses import dataclass, field
from typing import Callable

import h5py
import numpy as np

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, os.path.join(HERE, "..", "pipeline"))
import check_contract as cc  # noqa: E402  (make_input, pipeline_text, write, digest)

H = W = 64  # tiny frames keep the whole corpus fast, also under AddressSanitizer


@dataclass
class Case:
    name: str
    group: str                        # files | pipeline | frames | output | cli
    args: list[str]                   # after the binary; "{d}" is the case folder
    code: int                         # documented exit status
    words: list[str]                  # must appear in the error line (code 0: in a warning line)
    make: Callable[[str], None]       # writes the case's inputs into its folder
    output: str = "out.h5"            # path (relative to the folder) that a failed run must not create
    fsize: int | None = None          # RLIMIT_FSIZE in bytes: a disk that fills up
    mount: str | None = None          # "tmpfs" (small, fills up) or "ro" (read-only) at {d}/mnt
    as_nobody: bool = False           # run as user nobody (root ignores permission bits)
    success_check: Callable[[str], list[str]] | None = None  # code 0: checks of the output file
    env: dict = field(default_factory=dict)


# ---------------------------------------------------------------------------
# inputs
# ---------------------------------------------------------------------------

_lock = threading.Lock()  # the runner makes cases on two threads


@functools.lru_cache(maxsize=None)
def _holograms(frames: int):
    tmp = tempfile.mkdtemp(prefix="badinput-base-")
    try:
        _, inst, stack = cc.make_input(tmp, frames=frames, h=H, w=W)
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
    stack.setflags(write=False)
    return stack, inst


def holograms(frames: int):
    """(stack of uint16 12-bit counts, instrument) of `frames` off-axis holograms."""
    with _lock:
        return _holograms(frames)


INST = holograms(3)[1]


def h5(folder, name="holo.h5", **datasets):
    """An HDF5 file with the given datasets (value: array, or dict of create_dataset arguments)."""
    path = os.path.join(folder, name)
    with h5py.File(path, "w") as f:
        for k, v in datasets.items():
            if isinstance(v, dict):
                f.create_dataset(k, **v)
            else:
                f.create_dataset(k, data=v)
    return path


def pipeline(folder, name="p.toml", text=None, **kw):
    text = text if text is not None else cc.pipeline_text(INST, **kw)
    return cc.write(folder, name, text)


def base_text(**kw):
    return cc.pipeline_text(INST, extra_output=kw.pop("extra_output", 'previews = "none"\n'), **kw)


def good(folder, frames=3, dtype=np.uint16, text=None, edit=None, background=False):
    """holo.h5 of real holograms, p.toml running on it; `edit(stack)` spoils some frames."""
    stack = holograms(frames)[0].astype(np.float64)
    if edit:
        stack = edit(stack)
    h5(folder, holograms=stack.astype(dtype) if dtype is not None else stack)
    if background:
        h5(folder, "blank.h5", holograms=holograms(frames)[0][:1])
    pipeline(folder, text=text if text is not None else base_text())


def with_stage(text, before_type, stage):
    """Insert `stage` (TOML) before the first [[stage]] of type `before_type`."""
    marker = f'[[stage]]\ntype = "{before_type}"'
    assert marker in text, marker
    return text.replace(marker, stage + "\n" + marker, 1)


def replace(text, old, new):
    assert old in text, old
    return text.replace(old, new, 1)


def spoil(frame, value):
    def edit(stack):
        stack = stack.copy()
        if callable(value):
            value(stack[frame])
        else:
            stack[frame] = value
        return stack
    return edit


def nan_pixels(img):
    img[10, 12] = np.nan
    img[30:32, 40] = np.nan


def noisy_patch(img):
    # Speckle-like noise over a patch, far above the fringes: phase residues there.
    rng = np.random.default_rng(7)
    img[8:40, 8:40] = rng.uniform(0, 4000, (32, 32))


def inf_pixels(img):
    img[5, 7] = np.inf
    img[6, 7] = -np.inf


def warnings_attribute(*words):
    """Success check: the output exists and its warnings attribute names `words`."""
    def check(folder):
        path = os.path.join(folder, "out.h5")
        if not os.path.exists(path):
            return ["no output file"]
        with h5py.File(path, "r") as f:
            w = str(f.attrs.get("warnings", ""))
            n = f["frames/done"][...]
        bad = [f"warnings attribute lacks {x!r}: {w!r}" for x in words if x not in w]
        if words and w.count(words[0] + " ") != 1:  # once per frame
            bad.append(f"warnings attribute names {words[0]!r} {w.count(words[0] + ' ')} times: {w!r}")
        if not np.all(n == 1):
            bad.append(f"frames/done = {list(n)}")
        return bad
    return check


RUN = ["run", "{d}/p.toml"]


def cases() -> list[Case]:
    c: list[Case] = []

    def add(name, group, make, code, words, args=None, **kw):
        c.append(Case(name, group, list(args) if args else list(RUN), code, words, make, **kw))

    # ---- files: the input is not what it should be (exit 3) ---------------
    def text_file(d):
        cc.write(d, "holo.h5", "frame,value\n0,1\n")
        pipeline(d, text=base_text())
    add("not an HDF5 file", "files", text_file, 3, ["holo.h5", "not an HDF5 file"])

    def empty_file(d):
        open(os.path.join(d, "holo.h5"), "wb").close()
        pipeline(d, text=base_text())
    add("empty file", "files", empty_file, 3, ["holo.h5", "not an HDF5 file"])

    def truncated(keep):
        def make(d):
            good(d, frames=4)
            p = os.path.join(d, "holo.h5")
            size = os.path.getsize(p)
            with open(p, "r+b") as fh:
                fh.truncate(keep if keep > 1 else int(size * keep))
        return make
    add("HDF5 file truncated to its first 100 bytes", "files", truncated(100), 3, ["holo.h5"])
    add("HDF5 file truncated to half", "files", truncated(0.5), 3, ["holo.h5", "truncated"])

    def folder_input(d):
        os.makedirs(os.path.join(d, "holo.h5"))
        pipeline(d, text=base_text())
    add("a folder given as the input", "files", folder_input, 3, ["holo.h5", "folder"])

    def missing_dataset(d):
        h5(d, frames=holograms(3)[0])
        pipeline(d, text=base_text())
    add("missing dataset lists the ones there", "files", missing_dataset, 3,
        ["/holograms", "holo.h5", "/frames (3x64x64 uint16)"])

    def group_dataset(d):
        with h5py.File(os.path.join(d, "holo.h5"), "w") as f:
            f.create_group("holograms").create_dataset("raw", data=holograms(3)[0])
        pipeline(d, text=base_text())
    add("dataset is a group", "files", group_dataset, 3, ["/holograms", "is a group", "/holograms/raw"])

    add("rank 1 data", "files", lambda d: (h5(d, holograms=np.arange(4096, dtype=np.uint16)),
                                           pipeline(d, text=base_text())), 3, ["one-dimensional", "4096", "/holograms"])
    add("sparse dataset declaring 2^40 frames: refused, with the way to shard it", "files",
        lambda d: (h5(d, holograms=dict(shape=(2**40, H, W), dtype=np.uint16, chunks=(1, H, W))),
                   pipeline(d)), 3, ["holo.h5", "/holograms", "1099511627776 frames", "--frames", "merge"])
    add("rank 4 data", "files", lambda d: (h5(d, holograms=np.zeros((2, 2, H, W), np.uint16)),
                                           pipeline(d, text=base_text())), 3, ["4 dimensions", "2x2x64x64"])
    add("scalar dataset", "files", lambda d: (h5(d, holograms=np.uint16(7)), pipeline(d, text=base_text())), 3,
        ["scalar", "/holograms"])
    add("zero frames", "files", lambda d: (h5(d, holograms=np.zeros((0, H, W), np.uint16)),
                                           pipeline(d, text=base_text())), 3, ["empty dimension", "0x64x64"])
    add("zero-width frames", "files", lambda d: (h5(d, holograms=np.zeros((3, H, 0), np.uint16)),
                                                 pipeline(d, text=base_text())), 3, ["empty dimension", "3x64x0"])
    add("8x8 frames", "files", lambda d: (h5(d, holograms=np.zeros((3, 8, 8), np.uint16)),
                                          pipeline(d, text=base_text())), 3, ["8x8", "16x16"])
    add("string dtype", "files",
        lambda d: (h5(d, holograms={"data": np.array([["a" * 3] * W] * H, dtype=object),
                                    "dtype": h5py.string_dtype()}), pipeline(d, text=base_text())),
        3, ["string", "element type", "/holograms"])
    add("compound dtype", "files",
        lambda d: (h5(d, holograms=np.zeros((2, H, W), dtype=[("re", "<f4"), ("im", "<f4")])),
                   pipeline(d, text=base_text())), 3, ["compound", "re", "element type"])
    add("float16 dtype", "files", lambda d: (h5(d, holograms=np.zeros((2, H, W), np.float16)),
                                             pipeline(d, text=base_text())), 3, ["float16", "element type"])
    add("frames of 100000x100000 pixels declared but never written", "files",
        lambda d: (h5(d, holograms={"shape": (1, 100000, 100000), "dtype": np.uint8, "chunks": (1, 256, 256)}),
                   pipeline(d, text=base_text())), 3, ["100000x100000", "too large"])

    # ---- frames: the values inside the frames (exit 3, or 0 with a warning)
    add("NaN pixels in frame 1 (float32)", "frames", lambda d: good(d, dtype=np.float32, edit=spoil(1, nan_pixels)),
        3, ["frame 1", "NaN", "/holograms", "holo.h5"])
    add("Inf pixels in frame 2 (float64)", "frames", lambda d: good(d, dtype=np.float64, edit=spoil(2, inf_pixels)),
        3, ["frame 2", "infinite", "/holograms"])
    add("NaN in the first frame, the one the carrier is found on", "frames",
        lambda d: good(d, dtype=np.float32, edit=spoil(0, nan_pixels)), 3, ["frame 0", "NaN"])
    add("NaN in a frame outside the selection is never read", "frames",
        lambda d: good(d, dtype=np.float32, edit=spoil(2, nan_pixels)), 0, [],
        args=RUN + ["--frames", "0:2"], success_check=warnings_attribute())
    add("all-zero frame 1 is processed with a warning", "frames", lambda d: good(d, edit=spoil(1, 0)), 0,
        ["frame 1", "zero"], success_check=warnings_attribute("frame 1", "zero"))
    add("saturated uint8 frame 2 is processed with a warning", "frames",
        lambda d: good(d, dtype=np.uint8, edit=lambda s: spoil(2, 255)(np.clip(s / 16, 0, 255))), 0,
        ["frame 2", "saturated", "255"], success_check=warnings_attribute("frame 2", "saturated"))
    add("saturated uint16 frame 1 (65535) is processed with a warning", "frames",
        lambda d: good(d, edit=spoil(1, 65535)), 0, ["frame 1", "saturated", "65535"],
        success_check=warnings_attribute("frame 1", "saturated"))
    add("noisy first frame (the planning probe): its residue warning is printed once", "frames",
        lambda d: good(d, edit=spoil(0, noisy_patch),
                       text=base_text(extra_stage='[[stage]]\ntype = "unwrap"\nresidue_warning = 1e-4\n')), 0,
        ["frame 0:", "phase residues"], success_check=warnings_attribute("frame 0:", "phase residues"))
    add("12-bit camera frame 1 saturated at 4095 is processed with a warning", "frames",
        lambda d: good(d, edit=spoil(1, 4095)), 0, ["frame 1", "saturated", "12-bit"],
        success_check=warnings_attribute("frame 1", "12-bit"))
    add("all-zero first frame: no carrier to find", "frames", lambda d: good(d, edit=spoil(0, 0)), 3,
        ["frame 0", "flat"])
    add("frame selection beyond the last frame", "frames", good, 3, ["5:", "selects no frame", "3"],
        args=RUN + ["--frames", "5:"])
    add("frame selection that is not a range", "frames", good, 2, ["1-2", "start:stop"],
        args=RUN + ["--frames", "1-2"])
    add("frame selection with stop before start", "frames", good, 2, ["2:1", "stop must be greater"],
        args=RUN + ["--frames", "2:1"])
    add("frame selection with step 0", "frames", good, 2, ["0:3:0", "start:stop"], args=RUN + ["--frames", "0:3:0"])
    add("frame selection in the pipeline file with a negative start", "frames",
        lambda d: good(d, text=replace(base_text(), 'dataset = "/holograms"', 'dataset = "/holograms"\nframes = "-1:"')),
        2, ["p.toml:", "frames", "-1:"])

    # ---- background and other files the pipeline names ---------------------
    bg = 'dataset = "/holograms"\nbackground = "blank.h5"'
    add("background hologram of another size", "files",
        lambda d: (good(d, text=replace(base_text(), 'dataset = "/holograms"', bg)),
                   h5(d, "blank.h5", holograms=np.zeros((1, 48, 64), np.uint16))), 3, ["blank.h5", "48x64", "64x64"])
    add("missing background file", "files", lambda d: good(d, text=replace(base_text(), 'dataset = "/holograms"', bg)),
        3, ["blank.h5", "does not exist"])
    add("background file is not HDF5", "files",
        lambda d: (good(d, text=replace(base_text(), 'dataset = "/holograms"', bg)), cc.write(d, "blank.h5", "x")),
        3, ["blank.h5", "not an HDF5 file"])
    add("background with NaN pixels", "files",
        lambda d: (good(d, text=replace(base_text(), 'dataset = "/holograms"', bg)),
                   h5(d, "blank.h5", holograms=np.full((1, H, W), np.nan, np.float32))), 3, ["blank.h5", "NaN"])
    add("missing instrument profile", "pipeline",
        lambda d: good(d, text=base_text().replace("[instrument]\n", '[instrument]\nprofile = "scope.toml"\n')),
        2, ["p.toml:", "scope.toml", "does not exist"])
    add("instrument profile with a TOML syntax error", "pipeline",
        lambda d: (good(d, text=base_text().replace("[instrument]\n", '[instrument]\nprofile = "scope.toml"\n')),
                   cc.write(d, "scope.toml", 'name = "scope"\nmagnification = = 40\n')),
        2, ["scope.toml:2:", "not valid TOML"])
    profile = lambda body: lambda d: (
        good(d, text=base_text().replace("[instrument]\n", '[instrument]\nprofile = "scope.toml"\n')
             .replace('wavelength = "532 nm"\n', "")), cc.write(d, "scope.toml", body))
    add("instrument profile with a unit mistake", "pipeline", profile('name = "scope"\nwavelength = "532 um"\n'), 2,
        ["scope.toml:2:", "wavelength", "532 nm"])
    add("instrument profile with an unknown key", "pipeline", profile('wavelength = "532 nm"\nwavelenght = "1 um"\n'),
        2, ["scope.toml:2:", "wavelenght", 'did you mean "wavelength"'])
    add("unwrap mask file missing", "files",
        lambda d: good(d, text=base_text(extra_stage='[[stage]]\ntype = "unwrap"\nmask = "roi.h5:/mask"\n')),
        3, ["roi.h5", "does not exist"])

    # ---- pipeline file (exit 2) ----------------------------------------------
    def pl(edit):
        return lambda d: good(d, text=edit(base_text()))

    add("pipeline file with a TOML syntax error", "pipeline",
        pl(lambda t: replace(t, 'order = "+1"', 'order = "+1\n')), 2, ["p.toml:", "not valid TOML"])
    add("pipeline file missing", "pipeline", lambda d: None, 2, ["nothere.toml", "does not exist"],
        args=["run", "{d}/nothere.toml"])
    add("a folder given as the pipeline file", "pipeline", lambda d: os.makedirs(os.path.join(d, "p.toml")), 2,
        ["p.toml", "a folder, not a pipeline file"])
    add("an HDF5 file given as the pipeline file", "pipeline", good, 2, ["holo.h5:", "not valid TOML"],
        args=["run", "{d}/holo.h5"])
    add("missing wavelength", "pipeline", pl(lambda t: replace(t, f'wavelength = "{INST.wavelength * 1e9:.6g} nm"\n', "")),
        2, ["wavelength", "missing", "[instrument]"])
    add("wavelength of 0 nm", "pipeline", pl(lambda t: replace(t, '"532 nm"', '"0 nm"')), 2,
        ["wavelength", "positive"])
    add("negative pixel pitch", "pipeline", pl(lambda t: replace(t, '"4.8 um"', '"-4.8 um"')), 2,
        ["pixel_pitch", "positive"])
    add("missing pixel pitch", "pipeline", pl(lambda t: replace(t, 'pixel_pitch = "4.8 um"\n', "")), 2,
        ["pixel_pitch", "missing"])
    add("magnification 0", "pipeline", pl(lambda t: replace(t, "magnification = 25", "magnification = 0")), 2,
        ["magnification", "positive"])
    add("missing magnification", "pipeline", pl(lambda t: replace(t, "magnification = 25\n", "")), 2,
        ["magnification", "missing"])
    add("wavelength 532 m (a unit mistake)", "pipeline", pl(lambda t: replace(t, '"532 nm"', '"532 m"')), 2,
        ["p.toml:", "wavelength", "532 nm"])
    add("pixel pitch 4.8 mm (a unit mistake)", "pipeline", pl(lambda t: replace(t, '"4.8 um"', '"4.8 mm"')), 2,
        ["pixel_pitch", "4.8 um"])
    add("wavelength unit typo 532 mn", "pipeline", pl(lambda t: replace(t, '"532 nm"', '"532 mn"')), 2,
        ["p.toml:", "wavelength", '"mn"', 'did you mean "nm"'])
    add("wavelength nan nm", "pipeline", pl(lambda t: replace(t, '"532 nm"', '"nan nm"')), 2,
        ["wavelength", "not finite"])
    add("medium index 0.5", "pipeline", pl(lambda t: replace(t, "medium_index = 1.33538", "medium_index = 0.5")), 2,
        ["medium_index", "1 to 4"])
    add("numerical aperture above the medium index", "pipeline",
        pl(lambda t: replace(t, "numerical_aperture = 0.4", "numerical_aperture = 1.4")), 2, ["numerical_aperture"])
    add("wavelength as a bare number", "pipeline", pl(lambda t: replace(t, '"532 nm"', "532")), 2,
        ["wavelength", "bare number", "532 nm"])
    add("unknown stage type suggests the closest", "pipeline",
        pl(lambda t: replace(t, 'type = "sideband"', 'type = "sidebnad"')), 2,
        ["p.toml:", "sidebnad", 'did you mean "sideband"'])
    add("unknown instrument key suggests the closest", "pipeline",
        pl(lambda t: replace(t, "magnification = 25", "magnification = 25\nmedium_idx = 1.33")), 2,
        ["p.toml:", "medium_idx", 'did you mean "medium_index"'])
    add("misspelt [output] table", "pipeline", pl(lambda t: replace(t, "[output]", "[outptu]")), 2,
        ["outptu", 'did you mean "output"'])
    add("propagate before sideband", "pipeline",
        pl(lambda t: with_stage(t, "sideband", '[[stage]]\ntype = "propagate"\ndistance = "1 um"\n')), 2,
        ["stage 2 (propagate)", "sideband"])
    add("zernike on a wrapped field", "pipeline",
        pl(lambda t: replace(t, "[output]", '[[stage]]\ntype = "zernike"\n\n[output]')), 2,
        ["stage 4 (zernike)", "unwrap"])
    add("a pipeline that never leaves the hologram", "pipeline",
        lambda d: good(d, text=base_text().split("[[stage]]\ntype = \"sideband\"")[0] +
                       '[output]\npath = "out.h5"\n'), 2, ["p.toml", "sideband"])
    add("no stages", "pipeline",
        lambda d: good(d, text=base_text().split("[[stage]]")[0] + '[output]\npath = "out.h5"\n'), 2,
        ["p.toml", "no [[stage]]"])
    add("propagate step of 0 um", "pipeline",
        pl(lambda t: replace(t, 'distance = "-2 um"', 'distances = { from = "-2 um", to = "2 um", step = "0 um" }')),
        2, ["step", "positive"])
    add("a z-stack of two million planes", "pipeline",
        pl(lambda t: replace(t, 'distance = "-2 um"', 'distances = { from = "-1 m", to = "1 m", step = "1 um" }')),
        2, ["distances", "planes"])
    add("autofocus sweep of two million planes", "pipeline",
        pl(lambda t: with_stage(t, "propagate",
                                '[[stage]]\ntype = "autofocus"\nfrom = "-1 m"\nto = "1 m"\nstep = "1 um"\n')),
        2, ["stage 3 (autofocus)", "planes"])
    add("autofocus with a negative step", "pipeline",
        pl(lambda t: with_stage(t, "propagate",
                                '[[stage]]\ntype = "autofocus"\nfrom = "-5 um"\nto = "5 um"\nstep = "-1 um"\n')),
        2, ["step", "positive"])
    add("sideband radius 5", "pipeline", pl(lambda t: replace(t, 'order = "+1"', 'order = "+1"\nradius = 5')), 2,
        ["radius", "5"])
    add("propagate padding -1", "pipeline", pl(lambda t: replace(t, 'distance = "-2 um"', 'distance = "-2 um"\npadding = -1')),
        2, ["padding", "1 to 4"])
    add("drymass alpha 0", "pipeline",
        pl(lambda t: replace(t, "[output]", '[[stage]]\ntype = "unwrap"\n[[stage]]\ntype = "drymass"\nalpha = 0\n\n[output]')),
        2, ["alpha", "0.01"])
    add("fringe tukey fraction 1e9", "pipeline",
        pl(lambda t: replace(t, 'type = "fringe"', 'type = "fringe"\napodize = "tukey"\ntukey_fraction = 1e9')), 2,
        ["tukey_fraction"])
    add("deflate level 12", "pipeline",
        pl(lambda t: replace(t, "[output]\n", '[output]\ncompression = "deflate"\nlevel = 12\n')), 2, ["level", "9"])
    add("frames in flight 100000", "pipeline", pl(lambda t: t + "\n[run]\nframes_in_flight = 100000\n"), 2,
        ["frames_in_flight"])

    # ---- command line and --set (exit 2) ------------------------------------
    add("--set of a stage that does not exist", "cli", good, 2, ["--set stage.9.distance", "1 to 3"],
        args=RUN + ["--set", 'stage.9.distance=-1 um'])
    add("--set without =", "cli", good, 2, ["--set", "KEY=VALUE"], args=RUN + ["--set", "output.path"])
    add("--set of an unknown key suggests the closest", "cli", good, 2,
        ["stage 3 (propagate)", "distnace", 'did you mean "distance"'], args=RUN + ["--set", "stage.3.distnace=-1 um"])
    add("--set of a bare number for a length", "cli", good, 2, ["--set", "distance", "bare number"],
        args=RUN + ["--set", "stage.3.distance=-4"])
    add("--set of a table with a value", "cli", good, 2, ["--set", "input"], args=RUN + ["--set", "input.path.x=1"])
    add("--set of an empty output path", "cli", good, 2, ["[output]", "path", "missing"],
        args=RUN + ["--set", "output.path="])
    add("check with an unknown stage key", "cli",
        pl(lambda t: replace(t, 'order = "+1"', 'order = "+1"\nradious = 0.3')), 2,
        ["p.toml:18:1", "radious", 'did you mean "radius"'], args=["check", "{d}/p.toml"])
    add("refocus with a missing profile", "cli", good, 2, ["scope.toml"],
        args=["refocus", "{d}/holo.h5", "--profile", "{d}/scope.toml", "--distance", "-2 um", "-o", "{d}/out.h5"])
    add("refocus of a rank 4 dataset", "cli",
        lambda d: (h5(d, holograms=np.zeros((2, 2, H, W), np.uint16)), cc.write(d, "scope.toml", INST.toml())), 3,
        ["holo.h5", "4 dimensions"],
        args=["refocus", "{d}/holo.h5", "--profile", "{d}/scope.toml", "--distance", "-2 um", "-o", "{d}/out.h5"])
    add("--threads 0", "cli", good, 2, ["--threads"], args=RUN + ["--threads", "0"])
    add("unknown option", "cli", good, 2, ["--frobnicate"], args=RUN + ["--frobnicate"])
    add("environment WAVESTACK_FFT_PLANNING=fast", "cli", good, 2, ["WAVESTACK_FFT_PLANNING", "fast"],
        env={"WAVESTACK_FFT_PLANNING": "fast"})
    add("inspect a file that is not HDF5", "cli", text_file, 3, ["holo.h5", "not an HDF5 file"],
        args=["inspect", "{d}/holo.h5"])

    # ---- output (exit 2 for a refused path, 4 when it cannot be written) ------
    add("output path equal to the input path, spelt differently", "output", good, 2, ["input", "raw data"],
        args=RUN + ["-o", "{d}/sub/../holo.h5"], output="holo.h5")

    def hard_link(d):
        good(d)
        os.link(os.path.join(d, "holo.h5"), os.path.join(d, "same.h5"))
    add("output path a hard link of the input", "output", hard_link, 2, ["input", "raw data"],
        args=RUN + ["-o", "{d}/same.h5"], output="same.h5")
    add("output path equal to the background file", "output",
        lambda d: (good(d, text=replace(base_text(), 'dataset = "/holograms"', bg), background=True)), 2,
        ["background"], args=RUN + ["-o", "{d}/blank.h5"], output="blank.h5")
    add("output path is a folder", "output", lambda d: (good(d), os.makedirs(os.path.join(d, "out.h5"))), 4,
        ["out.h5", "folder"], output="out.h5/x")
    add("output folder under a regular file", "output", lambda d: (good(d), cc.write(d, "file.txt", "x")), 4,
        ["file.txt"], args=RUN + ["-o", "{d}/file.txt/out.h5"], output="file.txt/out.h5")
    add("output folder under /proc", "output", good, 4, ["/proc/wavestack-badinput"],
        args=RUN + ["-o", "/proc/wavestack-badinput/out.h5"], output="/proc/wavestack-badinput/out.h5")
    add("output folder on a read-only file system", "output", good, 4, ["mnt", "not writable"],
        args=RUN + ["-o", "{d}/mnt/out.h5"], output="mnt/out.h5", mount="ro")

    def locked(d):
        good(d)
        os.makedirs(os.path.join(d, "locked"))
        os.chmod(os.path.join(d, "locked"), 0o555)
    add("output folder not writable for the user", "output", locked, 4, ["locked", "not writable"],
        args=RUN + ["-o", "{d}/locked/out.h5"], output="locked/out.h5", as_nobody=True)
    add("preview folder name taken by a file", "output",
        lambda d: (good(d, text=base_text(extra_output="")), cc.write(d, "out_previews", "x")), 4, ["out_previews"])
    add("disk too small for the output (file size limit; uncompressed space is placed at creation)", "output",
        lambda d: good(d, frames=12), 4, ["out.h5", "File too large"], fsize=60_000)
    add("disk fills up mid-run (file size limit, deflate)", "output",
        lambda d: good(d, frames=12, text=base_text(extra_output='previews = "none"\ncompression = "deflate"\n')), 4,
        ["out.h5", "frame", "File too large"], fsize=60_000)
    add("disk fills up mid-run (small tmpfs)", "output", lambda d: good(d, frames=12), 4, ["mnt/out.h5", "frame"],
        args=RUN + ["-o", "{d}/mnt/out.h5"], output="mnt/out.h5", mount="tmpfs")
    return c


def main():
    root = sys.argv[1]
    os.makedirs(root, exist_ok=True)
    lines = []
    for i, case in enumerate(cases()):
        d = os.path.join(root, f"{i:02d}")
        os.makedirs(d, exist_ok=True)
        case.make(d)
        lines.append(f"{i:02d}  exit {case.code}  {case.name}: wavestack " +
                     " ".join(a.replace("{d}", d) for a in case.args))
    cc.write(root, "cases.txt", "\n".join(lines) + "\n")
    print(f"{len(lines)} cases written to {root}")


if __name__ == "__main__":
    main()
