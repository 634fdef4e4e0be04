#!/usr/bin/python3
"""Contract checks of the wavestack program (DESIGN.md "Output file",
"Pipeline file" and "Command line" sections): the output layout read back by
h5py, exit statuses and messages, atomic output, raw data never overwritten,
and bit-identical results for 1 and 2 threads.

usage: /usr/bin/python3 check_contract.py WAVESTACK_BINARY CASE
CASE: layout | compression | errors | atomic | threads | check
Exit 0 when every assertion holds; the failures are printed.
"""
import datetime
import hashlib
import os
import re
import subprocess
import sys
import tempfile
import tomllib

import h5py
import numpy as np

sys.path.insert(0, os.path.join(os.path.dirname(__file__), "..", "reference"))
import offaxis_reference as ref  # noqa: E402

problems = []


def expect(cond, what):
    if not cond:
        problems.append(what)
        print("FAIL:", what)


def make_input(folder, frames=3, h=240, w=300, corrupt_frame=None, peak=1.5, defocus=0.0, absorb=0.0,
               objects=None, aberration=0.0):
    """Off-axis holograms of a smooth phase object (Takeda 1982 model,
    offaxis_reference.py), uint16; optionally deflate-compressed chunks with
    one chunk's bytes overwritten to make that frame unreadable."""
    inst = ref.Instrument()
    car = ref.Carrier(ref.CHECK_CARRIER_FX, ref.CHECK_CARRIER_FY)
    dy = dx = inst.dx
    yy, xx = np.mgrid[0:h, 0:w] * dy
    refw = ref.reference_wave(h, w, dy, dx, car, 2.0)
    stack = np.empty((frames, h, w), np.uint16)
    rng = np.random.default_rng(7)
    band = ref.pupil(h, w, dy, dx, inst.cutoff)
    for k in range(frames):
        if objects is None:
            r2 = (yy - h * dy / 2) ** 2 + (xx - (w / 2 + 5 * k) * dx) ** 2
            obj = np.exp(1j * peak * np.exp(-r2 / (2 * (3e-6) ** 2)))
        else:
            # discs (radius 2.5 um) of phase `peak` and absorption `absorb`,
            # each at its own depth: (row, col, depth) per object
            obj = np.ones((h, w), np.complex128)
            for (r, c, z) in objects:
                disc = ((yy - r * dy) ** 2 + (xx - c * dx) ** 2 <= (2.5e-6) ** 2).astype(float)
                one = np.exp((1j * peak - absorb) * disc)
                one = np.fft.ifft2(np.fft.fft2(one) * band)  # objective pupil, NA/lambda0
                obj = obj * ref.propagate(one, dy, dx, inst.wavelength, inst.medium_index, z)
        if defocus:
            obj = ref.propagate(obj, dy, dx, inst.wavelength, inst.medium_index, defocus)
        if aberration:
            # the instrument's own curvature, aberration rad at the frame corner
            rr = ((yy - h * dy / 2) ** 2 + (xx - w * dx / 2) ** 2) / ((h * dy / 2) ** 2 + (w * dx / 2) ** 2)
            obj = obj * np.exp(1j * aberration * rr)
        inten = ref.record(obj, refw)
        counts = np.clip(np.round(inten / inten.mean() * 1800 + rng.normal(0, 2, inten.shape)), 0, 4095)
        stack[k] = counts
    if aberration:
        rr = ((yy - h * dy / 2) ** 2 + (xx - w * dx / 2) ** 2) / ((h * dy / 2) ** 2 + (w * dx / 2) ** 2)
        inten = ref.record(np.exp(1j * aberration * rr), refw)
        bg = np.clip(np.round(inten / inten.mean() * 1800), 0, 4095).astype(np.uint16)
        with h5py.File(os.path.join(folder, "blank.h5"), "w") as f:
            f.create_dataset("holograms", data=bg[None])
    path = os.path.join(folder, "holo.h5")
    with h5py.File(path, "w") as f:
        if corrupt_frame is None:
            f.create_dataset("holograms", data=stack)
        else:
            f.create_dataset("holograms", data=stack, chunks=(1, h, w), compression="gzip")
    if corrupt_frame is not None:
        with h5py.File(path, "r") as f:
            info = f["holograms"].id.get_chunk_info(corrupt_frame)
        with open(path, "r+b") as fh:
            fh.seek(info.byte_offset + 16)
            fh.write(b"\xff" * 64)
    return path, inst, stack


def pipeline_text(inst, out="out.h5", extra_output="", distance='"-2 um"', extra_stage=""):
    return f"""[input]
path = "holo.h5"
dataset = "/holograms"

{inst.toml()}
[[stage]]
type = "fringe"

[[stage]]
type = "sideband"
order = "+1"

[[stage]]
type = "propagate"
distance = {distance}
{extra_stage}
[output]
path = "{out}"
products = ["field", "amplitude", "phase", "opd"]
{extra_output}"""


def write(folder, name, text):
    p = os.path.join(folder, name)
    with open(p, "w") as f:
        f.write(text)
    return p


def run(binary, *args):
    r = subprocess.run([binary, *args], capture_output=True, text=True)
    return r.returncode, r.stdout, r.stderr


def digest(path):
    return hashlib.sha256(open(path, "rb").read()).hexdigest()


def case_layout(binary, d):
    _, inst, stack = make_input(d)
    p = write(d, "p.toml", pipeline_text(inst))
    code, out, err = run(binary, "run", p, "--quiet")
    expect(code == 0, f"run exits 0 (got {code}: {err.strip()})")
    path = os.path.join(d, "out.h5")
    expect(os.path.exists(path) and not os.path.exists(path + ".partial"), "final file exists, no .partial left")
    with h5py.File(path, "r") as f:
        a = f.attrs
        expect(a["format"] == "wavestack", "format attribute")
        expect(int(a["format_version"]) == 1, "format_version = 1")
        expect(len(str(a["software_version"])) > 0, "software_version")
        created = str(a["created"])
        expect(re.fullmatch(r"\d{4}-\d\d-\d\dT\d\d:\d\d:\d\d(\.\d+)?Z", created) is not None,
               f"created is ISO 8601 UTC ({created})")
        table = tomllib.loads(str(a["pipeline"]))  # the pipeline as run is valid TOML
        expect(table["stage"][2]["distance"] == "-2 um", "pipeline attribute holds the stages as run")
        expect(str(a["source_dataset"]) == "/holograms", "source_dataset")
        expect(os.path.samefile(str(a["source_file"]), os.path.join(d, "holo.h5")), "source_file")
        n, H, W = stack.shape
        field = f["field"]
        expect(field.dtype == np.complex64, f"field reads as complex64 (got {field.dtype})")
        expect(field.shape[0] == n, "N frames")
        _, h, w = field.shape
        for name, units, dt in [("field", "1", np.complex64), ("amplitude", "1", np.float32),
                                ("phase", "rad", np.float32), ("opd", "nm", np.float32)]:
            ds = f[name]
            expect(ds.shape == (n, h, w), f"{name} shape {ds.shape}")
            expect(ds.dtype == dt, f"{name} dtype {ds.dtype}")
            expect(ds.chunks == (1, h, w), f"{name} chunk is one frame ({ds.chunks})")
            expect(ds.attrs["units"] == units, f"{name} units")
            pitch = np.asarray(ds.attrs["pixel_pitch"])
            # after the crop the field of view is kept: pitch = H dy / h [derived]
            expect(np.allclose(pitch, [H * inst.dx / h, W * inst.dx / w], rtol=1e-9),
                   f"{name} pixel_pitch {pitch} after cropping to {h}x{w}")
            expect(abs(float(ds.attrs["wavelength"]) - inst.wavelength) < 1e-15, f"{name} wavelength")
            expect(abs(float(ds.attrs["medium_index"]) - inst.medium_index) < 1e-9, f"{name} medium_index")
            expect(abs(float(ds.attrs["plane"]) + 2e-6) < 1e-15, f"{name} plane = -2 um")
        expect(int(f["phase"].attrs["wrapped"]) == 1, "phase wrapped = 1 without unwrap")
        u = f["field"][...]
        expect(np.allclose(f["amplitude"][...], np.abs(u), rtol=1e-6, atol=1e-6), "amplitude = |field|")
        expect(np.allclose(f["phase"][...], np.angle(u), atol=1e-5), "phase = arg(field)")
        # OPD = phase * lambda0 / (2 pi) in nm (definition of optical path [common practice])
        expect(np.allclose(f["opd"][...], f["phase"][...] * inst.wavelength / (2 * np.pi) * 1e9, atol=1e-3),
               "opd = phase * lambda0 / 2pi in nm")
        expect(list(f["frames/index"][...]) == list(range(n)), "frames/index")
        expect(f["frames/index"].dtype == np.int64, "frames/index is int64")
        expect(list(f["frames/done"][...]) == [1] * n and f["frames/done"].dtype == np.uint8, "frames/done")
        expect(np.allclose(f["focus/distance"][...], -2e-6) and f["focus/distance"].attrs["units"] == "m",
               "focus/distance")
        for ds in ["frames/index", "frames/done"]:
            expect("units" in f[ds].attrs, f"{ds} has units")
    prev = os.path.join(d, "out_previews")
    expect(os.path.isdir(prev) and len(os.listdir(prev)) >= 2, "PNG previews written")
    # -o and --set override the output path
    code, _, err = run(binary, "run", p, "-q", "-o", os.path.join(d, "o2.h5"), "--frames", "1:3")
    expect(code == 0, f"-o run ({err.strip()})")
    with h5py.File(os.path.join(d, "o2.h5"), "r") as f:
        expect(list(f["frames/index"][...]) == [1, 2], "--frames 1:3 selects source frames 1 and 2")


def case_compression(binary, d):
    _, inst, _ = make_input(d)
    p1 = write(d, "a.toml", pipeline_text(inst, "plain.h5"))
    p2 = write(d, "b.toml", pipeline_text(inst, "packed.h5", 'compression = "deflate"\nlevel = 3\n'))
    for p in (p1, p2):
        code, _, err = run(binary, "run", p, "-q")
        expect(code == 0, f"run {p} ({err.strip()})")
    with h5py.File(os.path.join(d, "plain.h5")) as a, h5py.File(os.path.join(d, "packed.h5")) as b:
        for name in ["field", "amplitude", "phase", "opd"]:
            expect(b[name].compression == "gzip" and b[name].shuffle, f"{name} has shuffle+deflate")
            expect(a[name].compression is None, f"{name} uncompressed by default")
            expect(np.array_equal(a[name][...], b[name][...]), f"{name} identical with and without compression")


def case_errors(binary, d):
    path, inst, _ = make_input(d, frames=1)
    before = digest(path)
    # bare number for a length -> 2, names file:line:column and key
    p = write(d, "bare.toml", pipeline_text(inst, distance="-2"))
    code, _, err = run(binary, "run", p)
    line = pipeline_text(inst, distance="-2").splitlines().index("distance = -2") + 1
    expect(code == 2, f"bare number exits 2 (got {code})")
    expect(f"bare.toml:{line}:12" in err and "distance" in err and "-2 um" in err,
           f"bare number message names line {line}, column 12, key and the expected form: {err.strip()}")
    # unknown key -> 2 with line and key
    text = pipeline_text(inst).replace('order = "+1"', 'order = "+1"\nradious = 0.3')
    p = write(d, "key.toml", text)
    line = text.splitlines().index("radious = 0.3") + 1
    code, _, err = run(binary, "run", p)
    expect(code == 2 and f"key.toml:{line}:1" in err and 'unknown key "radious"' in err,
           f"unknown key exits 2 naming line {line} and the key: {code} {err.strip()}")
    # stages in an impossible order -> 2 naming the stage
    text = pipeline_text(inst).replace('[[stage]]\ntype = "sideband"', '[[stage]]\ntype = "unwrap"\n[[stage]]\ntype = "sideband"')
    code, _, err = run(binary, "run", write(d, "order.toml", text))
    expect(code == 2 and "stage 2 (unwrap)" in err and "sideband" in err, f"unwrap before sideband exits 2: {err.strip()}")
    # a transmission height without the index difference -> 2
    text = pipeline_text(inst).replace('[output]\n', '[output]\nheight = "transmission"\n')
    code, _, err = run(binary, "run", write(d, "height.toml", text))
    expect(code == 2 and "index_difference" in err, f"height without index difference exits 2: {err.strip()}")
    # the reference stage without a background -> 2
    text = pipeline_text(inst).replace('[[stage]]\ntype = "propagate"', '[[stage]]\ntype = "reference"\n[[stage]]\ntype = "propagate"')
    code, _, err = run(binary, "run", write(d, "ref.toml", text))
    expect(code == 2 and "background" in err, f"reference without background exits 2: {err.strip()}")
    # missing dataset -> 3, names the file and the dataset
    p = write(d, "ds.toml", pipeline_text(inst).replace('dataset = "/holograms"', 'dataset = "/frames"'))
    code, _, err = run(binary, "run", p)
    expect(code == 3 and "/frames" in err and "holo.h5" in err, f"missing dataset exits 3: {code} {err.strip()}")
    # missing input file -> 3
    p = write(d, "nf.toml", pipeline_text(inst).replace('path = "holo.h5"', 'path = "nothere.h5"'))
    code, _, err = run(binary, "run", p)
    expect(code == 3 and "nothere.h5" in err, f"missing file exits 3: {code} {err.strip()}")
    # output = input: refused, raw data untouched
    p = write(d, "same.toml", pipeline_text(inst, out="holo.h5"))
    code, _, err = run(binary, "run", p)
    expect(code == 2 and "input" in err, f"output = input refused with exit 2: {code} {err.strip()}")
    expect(digest(path) == before, "input file byte-identical after the refused run")
    # bad command line -> 2
    code, _, _ = run(binary, "run")
    expect(code == 2, f"missing argument exits 2 (got {code})")
    code, _, _ = run(binary, "frobnicate")
    expect(code == 2, f"unknown subcommand exits 2 (got {code})")
    code, out, _ = run(binary, "--help")
    expect(code == 0 and "propagate" in out and "sideband" in out, "--help lists the stage types")
    expect(not os.path.exists(os.path.join(d, "out.h5")), "no output file after failed runs")


def case_atomic(binary, d):
    path, inst, _ = make_input(d, frames=4, corrupt_frame=2)
    before = digest(path)
    p = write(d, "p.toml", pipeline_text(inst))
    code, _, err = run(binary, "run", p, "--threads", "2")
    expect(code == 3, f"an unreadable frame exits 3 (got {code}: {err.strip()})")
    expect("frame 2" in err and "/holograms" in err, f"message names the frame and dataset: {err.strip()}")
    expect(not os.path.exists(os.path.join(d, "out.h5")), "a failed run leaves no file at the output path")
    prev = os.path.join(d, "out_previews")
    expect(not os.path.isdir(prev) or not os.listdir(prev), "and no previews")
    expect(digest(path) == before, "input file byte-identical")


def case_threads(binary, d):
    _, inst, _ = make_input(d, frames=6)
    p = write(d, "p.toml", pipeline_text(inst))
    outs = []
    for t in ("1", "2"):
        o = os.path.join(d, f"t{t}.h5")
        code, _, err = run(binary, "run", p, "-q", "--threads", t, "-o", o)
        expect(code == 0, f"--threads {t} ({err.strip()})")
        outs.append(o)
    with h5py.File(outs[0]) as a, h5py.File(outs[1]) as b:
        for name in ["field", "amplitude", "phase", "opd", "frames/index", "focus/distance"]:
            expect(np.array_equal(a[name][...], b[name][...]), f"{name} bit-identical for 1 and 2 threads")


def case_check(binary, d):
    _, inst, _ = make_input(d, frames=2)
    p = write(d, "p.toml", pipeline_text(inst))
    code, out, err = run(binary, "check", p)
    expect(code == 0 and "ok" in out, f"check passes: {code} {err.strip()}")
    expect("stage 3 propagate" in out and "field" in out, f"check prints the planned shapes: {out}")
    expect(not os.path.exists(os.path.join(d, "out.h5")), "check writes nothing")


def case_unwrap(binary, d):
    # A 9 rad Gaussian phase bump (wraps once) reconstructed and unwrapped:
    # the peak comes back continuous, and /phase says it is not wrapped.
    # Truth: the synthesised object (offaxis_reference.py, Takeda 1982 model).
    _, inst, _ = make_input(d, frames=2, peak=9.0)
    p = write(d, "p.toml", pipeline_text(inst, distance='"0 um"', extra_stage='[[stage]]\ntype = "unwrap"\n'))
    code, _, err = run(binary, "run", p, "-q")
    expect(code == 0, f"run with unwrap ({err.strip()})")
    with h5py.File(os.path.join(d, "out.h5")) as f:
        expect(int(f["phase"].attrs["wrapped"]) == 0, "phase wrapped = 0 after unwrap")
        expect(int(f["opd"].attrs["wrapped"]) == 0, "opd wrapped = 0 after unwrap")
        expect(f["quality/residues"].shape == (2,), "quality/residues per frame")
        for k in range(2):
            ph = f["phase"][k]
            border = np.median(np.concatenate([ph[:5].ravel(), ph[-5:].ravel()]))
            peak = ph.max() - border
            expect(abs(peak - 9.0) < 0.15, f"frame {k}: unwrapped peak {peak:.3f} rad vs 9 rad")
            expect(np.all(np.abs(np.diff(ph, axis=1)) < 1.5), f"frame {k}: no 2pi jumps left")
        # time-lapse continuity: both frames have the same background level
        b0 = np.median(f["phase"][0][:5]); b1 = np.median(f["phase"][1][:5])
        expect(abs(b0 - b1) < 0.5, f"background piston held across frames ({b0:.3f}, {b1:.3f})")
        h, w = f["phase"].shape[1:]
    # a mask: pixels outside it keep their wrapped value (Herraez et al. 2002
    # with masks, as scikit-image's masked arrays do)
    mask = np.ones((h, w), np.uint8)
    mask[:, : w // 4] = 0
    with h5py.File(os.path.join(d, "umask.h5"), "w") as f:
        f["mask"] = mask
    p = write(d, "pm.toml", pipeline_text(inst, out="masked.h5", distance='"0 um"',
                                          extra_stage='[[stage]]\ntype = "unwrap"\nmask = "umask.h5"\n'))
    code, _, err = run(binary, "run", p, "-q")
    expect(code == 0, f"unwrap with a mask ({err.strip()})")
    with h5py.File(os.path.join(d, "masked.h5")) as f:
        ph, u = f["phase"][0], f["field"][0]
        out = ~mask.astype(bool)
        expect(np.allclose(ph[out], np.angle(u)[out], atol=1e-5), "masked-out pixels keep the wrapped phase")
        inside = ph[:, w // 4:]
        peak = inside.max() - np.median(inside[:5])
        expect(abs(peak - 9.0) < 0.15, f"inside the mask the bump is unwrapped ({peak:.3f} rad)")


def case_zstack(binary, d):
    # `wavestack refocus` with a range of planes writes (N, Z, h, w) stacks
    # and /focus/planes (DESIGN.md output file, issue: z-stacks); each plane
    # equals a single-distance run to that plane.
    _, inst, _ = make_input(d, frames=2)
    prof = write(d, "inst.toml", inst.toml())
    holo = os.path.join(d, "holo.h5")
    out = os.path.join(d, "stack.h5")
    code, _, err = run(binary, "refocus", holo, "--profile", prof, "--planes", "-2 um:2 um:1 um", "-o", out, "-q")
    expect(code == 0, f"refocus --planes ({err.strip()})")
    p = write(d, "p.toml", pipeline_text(inst, out="one.h5"))  # distance -2 um
    code, _, err = run(binary, "run", p, "-q")
    expect(code == 0, f"single-distance run ({err.strip()})")
    with h5py.File(out) as f, h5py.File(os.path.join(d, "one.h5")) as g:
        n, h, w = g["field"].shape
        expect(f["field"].shape == (n, 5, h, w), f"stack shape {f['field'].shape}")
        expect(f["field"].chunks == (1, 5, h, w), "one frame per chunk")
        expect(np.allclose(f["focus/planes"][...], [-2e-6, -1e-6, 0, 1e-6, 2e-6], atol=1e-15), "focus/planes")
        expect(f["focus/planes"].attrs["units"] == "m", "focus/planes units")
        expect("plane" not in f["field"].attrs, "no single plane attribute on a stack")
        expect(np.all(np.isnan(f["focus/distance"][...])), "focus/distance is NaN for a stack")
        a, b = f["field"][:, 0], g["field"][...]
        err_rel = np.linalg.norm(a - b) / np.linalg.norm(b)
        expect(err_rel < 1e-6, f"plane -2 um equals the single-distance run (relative {err_rel:.2e})")
    code, text, _ = run(binary, "refocus", holo, "--profile", prof, "--distance", "-8 um", "--print")
    expect(code == 0 and tomllib.loads(text)["stage"][2]["distance"] == "-8 um", "refocus --print gives the pipeline")
    code, _, err = run(binary, "refocus", holo, "--profile", prof)
    expect(code == 2 and "--distance" in err, f"refocus without a distance exits 2: {err.strip()}")


def case_autofocus(binary, d):
    # Disc objects recorded 5 um beyond their focal plane: the autofocus
    # stage must find -5 um within a tenth of the depth of field
    # lambda0 n / NA^2 (Inoue & Spring, Video Microscopy 1997 [common
    # practice; from memory]); propagate distance = "focus" applies it.
    _, inst, _ = make_input(d, frames=3, h=256, w=256, peak=0.0, absorb=0.8,
                            objects=[(128, 128, 0.0)], defocus=5e-6)
    dof = inst.wavelength * inst.medium_index / inst.numerical_aperture ** 2
    af = '[[stage]]\ntype = "autofocus"\nfrom = "-10 um"\nto = "0 um"\nstep = "0.5 um"\n{extra}\n'
    results = {}
    for name, extra in [("plain", ""), ("tracked", "track = true")]:
        text = pipeline_text(inst, out=f"{name}.h5", distance='"focus"').replace(
            '[[stage]]\ntype = "propagate"', af.format(extra=extra) + '[[stage]]\ntype = "propagate"')
        p = write(d, f"{name}.toml", text)
        code, _, err = run(binary, "run", p, "-q")
        expect(code == 0, f"{name} autofocus run ({err.strip()})")
        with h5py.File(os.path.join(d, f"{name}.h5")) as f:
            z = f["focus/distance"][...]
            expect(np.all(np.abs(z + 5e-6) < dof / 10), f"{name}: focus {z * 1e6} um vs -5 um (DOF/10 = {dof / 10 * 1e6:.2f} um)")
            expect(f["focus/curve"].shape == (3, 21), f"{name}: focus/curve (N, S) {f['focus/curve'].shape}")
            expect(np.allclose(f["focus/distances"][...], np.arange(21) * 0.5e-6 - 10e-6), "focus/distances")
            expect(np.all(f["focus/confidence"][...] > 0) and np.all(f["focus/sure"][...] == 1), "sure with confidence")
            expect("plane" not in f["field"].attrs, "no single plane attribute when the focus varies per frame")
            results[name] = z
    expect(np.allclose(results["plain"], results["tracked"], atol=1e-9), "tracking gives the same focus here")
    expect(os.path.exists(os.path.join(d, "plain_previews", "frame00000_focus_curve.png")), "focus curve PNG")
    # two objects at different depths: per-object focus finds both
    d = os.path.join(d, "two")
    os.makedirs(d)
    _, inst, _ = make_input(d, frames=1, h=256, w=320, peak=1.0, absorb=0.3,
                            objects=[(128, 80, -4e-6), (128, 240, 3e-6)], defocus=0.0)
    text = pipeline_text(inst, out="objects.h5", distance='"0 um"').replace(
        '[[stage]]\ntype = "propagate"', af.replace("-10 um", "-8 um").replace('"0 um"', '"8 um"').format(
            extra="objects = true") + '[[stage]]\ntype = "propagate"')
    p = write(d, "objects.toml", text)
    code, _, err = run(binary, "run", p, "-q")
    expect(code == 0, f"per-object autofocus run ({err.strip()})")
    with h5py.File(os.path.join(d, "objects.h5")) as f:
        t = f["focus/objects"][...]
        expect(len(t) == 2, f"two objects found ({len(t)})")
        if len(t) == 2:
            order = np.argsort(t["centroid_column"])
            # the object recorded at depth z is in focus at -z
            found = t["distance"][order]
            expect(abs(found[0] - 4e-6) < dof / 10 and abs(found[1] + 3e-6) < dof / 10,
                   f"object depths {found * 1e6} um vs +4 and -3 um")
    csv = os.path.join(d, "objects_focus_objects.csv")
    expect(os.path.exists(csv) and open(csv).readline().startswith("frame,object,"), "per-object CSV beside the HDF5")


def case_autofocus_scene(binary, d):
    # The invented demo scene (`wavestack demo`: four smooth cells and five
    # 0.5 um beads, all recorded 8 um beyond their focal plane, 12-bit
    # holograms with camera noise): whole-frame and per-object autofocus
    # must call every frame and every object sure. Regression check of the
    # noise split (focus/search.hpp split_tile): with 8 px blocks 9 of 16
    # frames and 37 of 80 cells were unsure. The beads are found within a
    # tenth of the depth of field lambda0 n / NA^2 (Inoue & Spring 1997
    # [common practice; from memory]); the smooth cells, a weak lens each,
    # pull the Tamura coefficient of the gradient by up to 0.3 um (the bias
    # documented in tests/focus/test_default_metric.cpp), hence 0.4 um for
    # them and for the frames.
    code, _, err = run(binary, "demo", d, "--frames", "4", "-q")
    expect(code == 0, f"demo data ({err.strip()})")
    text = open(os.path.join(d, "demo-pipeline.toml")).read()
    marker = '[[stage]]\ntype = "propagate"'
    expect(marker in text, "the demo pipeline has a propagate stage")
    af = '[[stage]]\ntype = "autofocus"\nfrom = "-14 um"\nto = "-2 um"\nstep = "0.5 um"\n{extra}\n'
    for name, extra in [("frames", ""), ("objects", "objects = true")]:
        t = re.sub(r'(\[\[stage\]\]\ntype = "propagate"\n)distance = [^\n]*', r'\1distance = "focus"', text)
        t = t.replace(marker, af.format(extra=extra) + marker, 1)
        t = re.sub(r'(\[output\][^\[]*?)path = [^\n]*', r'\1path = "' + name + '.h5"', t, count=1)
        p = write(d, f"{name}.toml", t)
        code, _, err = run(binary, "run", p, "-q")
        expect(code == 0, f"{name}: autofocus run on the demo scene ({err.strip()})")
        if code != 0:
            continue
        with h5py.File(os.path.join(d, f"{name}.h5")) as f:
            z = f["focus/distance"][...]
            expect(np.all(f["focus/sure"][...] == 1), f"{name}: every frame sure ({f['focus/sure'][...]})")
            expect(np.all(np.abs(z + 8e-6) < 0.4e-6), f"{name}: frame focus {z * 1e6} um vs -8 um")
            if name == "objects":
                dof = 632.8e-9 * 1.33211 / 0.75 ** 2
                o = f["focus/objects"][...]
                expect(len(o) >= 4 * 8, f"objects found: {len(o)} in 4 frames")
                expect(np.all(o["sure"] == 1), f"every object sure ({np.sum(o['sure'] == 0)} of {len(o)} unsure)")
                beads = o[o["area"] < 100]
                expect(len(beads) >= 4 * 3, f"beads found: {len(beads)}")
                expect(np.all(np.abs(beads["distance"] + 8e-6) < dof / 10),
                       f"bead focus {np.round(beads['distance'] * 1e6, 3)} um vs -8 um (DOF/10 {dof / 10 * 1e6:.2f} um)")
                expect(np.all(np.abs(o["distance"] + 8e-6) < 0.4e-6),
                       f"object focus {np.round(o['distance'] * 1e6, 3)} um vs -8 um")


def case_measure(binary, d):
    # unwrap -> flatten -> zernike -> drymass on a reconstructed phase bump:
    # the datasets exist with the documented shapes, and the dry mass equals
    # lambda0/(2 pi alpha) * integral of phase (Barer 1952; Popescu 2008
    # [from memory]) computed independently from /phase with numpy.
    _, inst, _ = make_input(d, frames=2, peak=3.0)
    stages = ('[[stage]]\ntype = "unwrap"\n[[stage]]\ntype = "flatten"\n[[stage]]\ntype = "zernike"\n'
              '[[stage]]\ntype = "drymass"\nalpha = 0.2\n')
    p = write(d, "m.toml", pipeline_text(inst, distance='"0 um"', extra_stage=stages))
    code, _, err = run(binary, "run", p, "-q")
    expect(code == 0, f"measurement run ({err.strip()})")
    with h5py.File(os.path.join(d, "out.h5")) as f:
        expect(f["compensation/coefficients"].shape == (2, 6), "compensation/coefficients (N, 6)")
        expect(f["wavefront/zernike"].shape == (2, 15) and f["wavefront/zernike"].attrs["units"] == "nm",
               "wavefront/zernike (N, 15) in nm")
        expect(str(f["wavefront/zernike"].attrs["index"]).startswith("0:0,0:"), "ANSI index table attribute")
        t = f["objects/mass"][...]
        expect(set(t["frame"]) == {0, 1}, "objects in both frames")
        ph = f["phase"][0]
        dy, dx = f["phase"].attrs["pixel_pitch"]
        bg = np.median(ph)
        # total over the frame: m = lambda0/(2 pi alpha) * sum(phase - background) dA above 0.05 rad
        sel = ph - bg > 0.05
        mass = inst.wavelength * 1e6 / (2 * np.pi * 0.2) * np.sum((ph - bg)[sel]) * dy * dx * 1e12
        total = t["dry_mass"][t["frame"] == 0].sum()
        expect(abs(total - mass) / mass < 0.05, f"dry mass {total:.3f} pg vs numpy {mass:.3f} pg")
        big = t[t["frame"] == 0][np.argmax(t["dry_mass"][t["frame"] == 0])]
        # the bump's peak: 3 rad = 3 lambda0 / (2 pi) of optical path [derived]
        expect(abs(big["peak_opd"] - 3 * inst.wavelength * 1e9 / (2 * np.pi)) < 5, f"peak OPD {big['peak_opd']:.1f} nm")
    expect(os.path.exists(os.path.join(d, "out_objects_mass.csv")), "dry-mass CSV")
    # flatten over a background given as a mask file: exactly its pixels are fitted
    with h5py.File(os.path.join(d, "out.h5")) as f:
        h, w = f["phase"].shape[1:]
    mask = np.zeros((h, w), np.uint8)
    mask[:10] = mask[-10:] = 1
    mask[:, :10] = mask[:, -10:] = 1
    with h5py.File(os.path.join(d, "mask.h5"), "w") as f:
        f["mask"] = mask
    text = pipeline_text(inst, out="masked.h5", distance='"0 um"',
                         extra_stage='[[stage]]\ntype = "unwrap"\n[[stage]]\ntype = "flatten"\nregion = "mask"\nmask = "mask.h5:/mask"\n')
    code, _, err = run(binary, "run", write(d, "mask.toml", text), "-q")
    expect(code == 0, f"flatten with a mask ({err.strip()})")
    with h5py.File(os.path.join(d, "masked.h5")) as f:
        n = f["compensation/background_pixels"][...]
        expect(np.all(n == mask.sum()), f"fitted over the mask's {mask.sum()} pixels ({n})")
    bad = np.zeros((h + 1, w), np.uint8)
    with h5py.File(os.path.join(d, "mask.h5"), "w") as f:
        f["mask"] = bad
    code, _, err = run(binary, "run", write(d, "mask.toml", text), "-q")
    expect(code == 3 and "mask" in err, f"a mask of the wrong size exits 3: {code} {err.strip()}")
    expect(os.path.exists(os.path.join(d, "out_wavefront_zernike_table.csv")), "Zernike CSV")


def case_reference(binary, d):
    # Reference-hologram compensation: the instrument's curvature (3 rad at
    # the corners) recorded in both the object and the blank hologram is
    # divided out [common practice: double-exposure compensation]; the
    # reflection height is OPD/2.
    _, inst, _ = make_input(d, frames=2, peak=1.5, aberration=3.0)
    base = pipeline_text(inst, distance='"0 um"').replace('dataset = "/holograms"',
                                                       'dataset = "/holograms"\nbackground = "blank.h5"')
    with_ref = base.replace('[[stage]]\ntype = "propagate"', '[[stage]]\ntype = "reference"\n\n[[stage]]\ntype = "propagate"')
    with_ref = with_ref.replace('[output]\npath = "out.h5"', '[output]\npath = "ref.h5"\nheight = "reflection"')
    with_ref = with_ref.replace('products = ["field", "amplitude", "phase", "opd"]',
                                'products = ["field", "amplitude", "phase", "opd", "height"]')
    for name, text in [("plain", base), ("ref", with_ref)]:
        code, _, err = run(binary, "run", write(d, f"{name}.toml", text), "-q")
        expect(code == 0, f"{name} run ({err.strip()})")
    with h5py.File(os.path.join(d, "out.h5")) as a, h5py.File(os.path.join(d, "ref.h5")) as b:
        def edge_spread(ph):  # phase spread along the frame border, away from the object
            ring = np.concatenate([ph[2:6].ravel(), ph[-6:-2].ravel(), ph[:, 2:6].ravel(), ph[:, -6:-2].ravel()])
            ring = np.angle(np.exp(1j * (ring - np.angle(np.mean(np.exp(1j * ring))))))
            return ring.std()
        s0, s1 = edge_spread(a["phase"][0]), edge_spread(b["phase"][0])
        expect(s0 > 0.5, f"without the reference the curvature shows ({s0:.3f} rad)")
        expect(s1 < 0.05, f"with the reference the border is flat ({s1:.3f} rad)")
        expect(np.allclose(b["height"][...], b["opd"][...] / 2, atol=1e-4), "reflection height = OPD/2")
        expect(b["height"].attrs["units"] == "nm" and b["height"].attrs["mode"] == "reflection", "height attributes")


CASES = {"reference": case_reference, "autofocus": case_autofocus, "autofocus_scene": case_autofocus_scene, "measure": case_measure, "zstack": case_zstack, "unwrap": case_unwrap, "layout": case_layout, "compression": case_compression, "errors": case_errors,
         "atomic": case_atomic, "threads": case_threads, "check": case_check}

def main(cases):
    """Run the case named on the command line in a fresh folder (or in
    $WAVESTACK_KEEP_TEST_DIR, to inspect a failing case's files)."""
    binary, case = sys.argv[1], sys.argv[2]
    keep = os.environ.get("WAVESTACK_KEEP_TEST_DIR")
    if keep:
        os.makedirs(keep, exist_ok=True)
        cases[case](os.path.abspath(binary), keep)
    else:
        with tempfile.TemporaryDirectory() as d:
            cases[case](os.path.abspath(binary), d)
    print("FAILED" if problems else "PASS", f"({len(problems)} problems)")
    sys.exit(1 if problems else 0)


if __name__ == "__main__":
    main(CASES)
