#!/usr/bin/python3
"""Batch runs that survive (README "Long batches: resume, shards, merge"):
killed runs resumed with --resume equal an uninterrupted run, --resume
refuses another pipeline or other input, repeated runs are bit-identical,
and shards run with --frames then joined by `wavestack merge` equal a
single run, read back with h5py as one array.

usage: /usr/bin/python3 check_batches.py WAVESTACK_BINARY CASE
CASE: kill | refuse | shards
Exit 0 when every assertion holds; the failures are printed.
"""
import os
import random
import signal
import subprocess
import sys
import time

import h5py
import numpy as np

sys.path.insert(0, os.path.dirname(__file__))
from check_contract import digest, expect, main, make_input, pipeline_text, run, write  # noqa: E402

# unwrap + dry mass: per-frame images, records and a per-object table (kept
# in the run journal until the run finishes)
MEASURE = '[[stage]]\ntype = "unwrap"\n[[stage]]\ntype = "drymass"\nalpha = 0.2\n'
# autofocus with tracking: a sequential stage whose state runs frame to frame
TRACK = '[[stage]]\ntype = "autofocus"\nfrom = "-6 um"\nto = "6 um"\nstep = "1 um"\ntrack = true\nwindow = 3\n'


def walk(f):
    """Every dataset and group of an open h5py file, by path."""
    out = {}
    f.visititems(lambda name, obj: out.__setitem__(name, obj))
    return out


def without_output_path(text):
    lines, section = [], None
    for line in str(text).splitlines():
        if line.startswith("["):
            section = line
        if not (section == "[output]" and line.startswith("path =")):
            lines.append(line)
    return "\n".join(lines)


def same_files(a_path, b_path, what, skip_attrs=("created",)):
    """All datasets bit-identical, all attributes equal except `skip_attrs`
    (the pipeline text compared without its [output] path, which -o sets)."""
    ok = True
    with h5py.File(a_path) as a, h5py.File(b_path) as b:
        ia, ib = walk(a), walk(b)
        if sorted(ia) != sorted(ib):
            expect(False, f"{what}: same datasets ({sorted(set(ia) ^ set(ib))} differ)")
            return False
        for name in ia:
            oa, ob = ia[name], ib[name]
            if isinstance(oa, h5py.Dataset):
                da, db = oa[()], ob[()]
                if da.dtype != db.dtype or np.shape(da) != np.shape(db) or \
                        np.asarray(da).tobytes() != np.asarray(db).tobytes():
                    expect(False, f"{what}: dataset {name} bit-identical")
                    ok = False
            for k in set(oa.attrs) | set(ob.attrs):
                if k in skip_attrs:
                    continue
                va, vb = oa.attrs.get(k), ob.attrs.get(k)
                if not np.array_equal(np.asarray(va), np.asarray(vb)):
                    expect(False, f"{what}: attribute {name}:{k} equal ({va!r} vs {vb!r})")
                    ok = False
        for k in set(a.attrs) | set(b.attrs):
            va, vb = str(a.attrs.get(k)), str(b.attrs.get(k))
            if k == "pipeline":
                va, vb = without_output_path(va), without_output_path(vb)
            if k not in skip_attrs and va != vb:
                expect(False, f"{what}: root attribute {k} equal")
                ok = False
    return ok


def kill_and_resume(binary, d, name, text, kills, rng, env):
    """Run once uninterrupted (the reference), then kill a run at `kills`
    random moments and resume each with --resume; every final file must
    equal the reference and no final file may exist before completion."""
    p = write(d, f"{name}.toml", text)
    ref_out = os.path.join(d, f"{name}-ref.h5")
    # the reference run, timed: when its partial file appears (set-up done)
    # and when it ends
    t0 = time.monotonic()
    proc = subprocess.Popen([binary, "run", p, "-q", "-o", ref_out], stderr=subprocess.PIPE, text=True, env=env)
    setup = None
    while proc.poll() is None:
        if setup is None and os.path.exists(ref_out + ".partial"):
            setup = time.monotonic() - t0
        time.sleep(0.002)
    full = time.monotonic() - t0
    setup = full if setup is None else setup
    code, err = proc.returncode, proc.stderr.read()
    expect(code == 0, f"{name}: uninterrupted run ({err.strip()})")
    # a second uninterrupted run is bit-identical (determinism)
    again = os.path.join(d, f"{name}-again.h5")
    code, _, err = run(binary, "run", p, "-q", "--threads", "1", "-o", again)
    expect(code == 0 and same_files(ref_out, again, f"{name}: 1 thread vs default"), "repeat run identical")
    out = os.path.join(d, f"{name}-k.h5")
    resumed_mid = 0
    for k in range(kills):
        for f in (out, out + ".partial", out + ".partial-journal"):
            if os.path.exists(f):
                os.remove(f)
        # a quarter of the kills anywhere in the run's life, the others while
        # frames are being written (after the partial file appears)
        proc = subprocess.Popen([binary, "run", p, "-q", "-o", out], stdout=subprocess.DEVNULL,
                                stderr=subprocess.PIPE, env=env)
        t0 = time.monotonic()
        if k % 4 == 0:
            moment = rng.uniform(0.0, 1.05) * full
        else:
            while proc.poll() is None and not os.path.exists(out + ".partial"):
                time.sleep(0.002)
            moment = time.monotonic() - t0 + rng.uniform(0.05, 1.0) * (full - setup)
        time.sleep(max(0.0, moment - (time.monotonic() - t0)))
        proc.send_signal(signal.SIGKILL)
        proc.wait()
        finished = proc.returncode == 0
        if os.path.exists(out):
            # only ever the complete result
            expect(same_files(ref_out, out, f"{name} kill {k}: a final file after the kill is complete"),
                   "final file complete")
        if os.path.exists(out + ".partial"):
            try:
                with h5py.File(out + ".partial") as f:
                    done = int(np.sum(f["frames/done"][...]))
            except (OSError, KeyError):
                done = 0  # killed while the file was being set up: resume starts over
            resumed_mid += 0 < done < 240
        r = subprocess.run([binary, "run", p, "-o", out, "--resume"], capture_output=True, text=True, env=env)
        expect(r.returncode == 0, f"{name} kill {k} at {moment:.2f}s (finished={finished}): resume exits 0 "
                                  f"({r.stderr.strip()})")
        if r.returncode == 0:
            same_files(ref_out, out, f"{name} kill {k} at {moment:.2f}s: resumed file equals the uninterrupted run")
            expect(not os.path.exists(out + ".partial") and not os.path.exists(out + ".partial-journal"),
                   f"{name} kill {k}: no partial or journal left after the resume")
    print(f"{name}: {kills} kills, {resumed_mid} resumed from a partial file with frames done, "
          f"run {full:.2f}s of which set-up {setup:.2f}s")
    return resumed_mid


def case_kill(binary, d):
    path, inst, _ = make_input(d, frames=240, h=160, w=200, peak=3.0)
    before = digest(path)
    env = dict(os.environ)
    rng = random.Random(20261201)
    total = kill_and_resume(binary, d, "measure", pipeline_text(inst, distance='"0 um"', extra_stage=MEASURE), 20,
                            rng, env)
    total += kill_and_resume(binary, d, "deflate",
                             pipeline_text(inst, distance='"0 um"', extra_stage=MEASURE,
                                           extra_output='compression = "deflate"\nlevel = 1\n'), 4, rng, env)
    track = pipeline_text(inst, distance='"focus"').replace('[[stage]]\ntype = "propagate"',
                                                            TRACK + '\n[[stage]]\ntype = "propagate"')
    total += kill_and_resume(binary, d, "track", track, 4, rng, env)
    expect(total >= 6, f"kills left frames to continue ({total} of 28)")
    expect(digest(path) == before, "input file byte-identical")


def case_refuse(binary, d):
    # a partial file made by a run that stops at an unreadable frame (8)
    path, inst, _ = make_input(d, frames=12, h=160, w=200, corrupt_frame=8)
    text = pipeline_text(inst, distance='"0 um"', extra_stage=MEASURE)
    p = write(d, "p.toml", text)
    out = os.path.join(d, "out.h5")
    code, _, err = run(binary, "run", p, "-q", "--threads", "1")
    expect(code == 3 and os.path.exists(out + ".partial") and not os.path.exists(out),
           f"a failed run leaves only the partial file ({code} {err.strip()})")
    with h5py.File(out + ".partial") as f:
        expect(f["frames/done"][:8].all() and not f["frames/done"][8:].any(), "frames 0-7 are done")
    other = write(d, "other.toml", text.replace("alpha = 0.2", "alpha = 0.18"))
    code, _, err = run(binary, "run", other, "--resume")
    expect(code == 2 and "cannot resume" in err and "pipeline differs" in err and "alpha" in err,
           f"another pipeline is refused with exit 2 naming the line: {code} {err.strip()}")
    code, _, err = run(binary, "run", p, "--resume", "--frames", "0:6")
    expect(code == 2 and "frames" in err, f"another frame selection is refused: {code} {err.strip()}")
    # other input data under the same name
    with h5py.File(os.path.join(d, "holo.h5"), "r+") as f:
        f["holograms"][0, 0, 0] = f["holograms"][0, 0, 0] + 1
    code, _, err = run(binary, "run", p, "--resume")
    expect(code == 3 and "input data differ" in err, f"other input data are refused with exit 3: {code} {err.strip()}")
    expect(os.path.exists(out + ".partial") and not os.path.exists(out), "a refused resume keeps the partial file")
    # the same frames written again without the damaged chunk: the same
    # data, so the resume continues at frame 8 and equals a fresh run
    make_input(d, frames=12, h=160, w=200)
    code, stdout, err = run(binary, "run", p, "--resume")
    expect(code == 0 and "resumed at frame 8 of 12" in stdout, f"resume after repairing the input: {stdout} {err}")
    fresh = os.path.join(d, "fresh.h5")
    run(binary, "run", p, "-q", "-o", fresh)
    expect(os.path.exists(out) and same_files(fresh, out, "resumed after repair vs fresh"), "resumed equals fresh")
    # a complete output of the same run: --resume does nothing
    code, stdout, err = run(binary, "run", p, "--resume")
    expect(code == 0 and "already complete" in stdout, f"--resume of a complete output does nothing: {stdout} {err}")


def case_shards(binary, d):
    path, inst, _ = make_input(d, frames=10, h=160, w=200, peak=3.0)
    text = pipeline_text(inst, distance='"0 um"', extra_stage=MEASURE)
    p = write(d, "p.toml", text)
    single = os.path.join(d, "single.h5")
    code, _, err = run(binary, "run", p, "-q", "-o", single)
    expect(code == 0, f"single run ({err.strip()})")
    os.makedirs(os.path.join(d, "shards"))
    shards = []
    for k, sel in enumerate(["0:4", "4:7", "7:10"]):
        s = os.path.join(d, "shards", f"part{k}.h5")
        code, _, err = run(binary, "run", p, "-q", "--frames", sel, "-o", s)
        expect(code == 0, f"shard {sel} ({err.strip()})")
        shards.append(s)
    merged = os.path.join(d, "merged.h5")
    code, stdout, err = run(binary, "merge", merged, shards[2], shards[0], shards[1])
    expect(code == 0, f"merge exits 0 ({err.strip()})")
    same_files(single, merged, "merged vs single run", skip_attrs=("created", "merged_from", "frames_selected"))
    with h5py.File(merged) as f:
        expect(f["phase"].is_virtual and f["frames/index"].is_virtual, "per-frame datasets are virtual (no copy)")
        expect(f["phase"].shape == (10, 160, 200) or f["phase"].shape[0] == 10, "read as one (N, h, w) array")
        expect(list(f["frames/index"][...]) == list(range(10)), "/frames/index in order")
        expect(not f["objects/mass"].is_virtual, "tables are joined (copied)")
    csv_single = open(os.path.join(d, "single_objects_mass.csv")).read()
    csv_merged = open(os.path.join(d, "merged_objects_mass.csv")).read()
    expect(csv_single == csv_merged, "merged CSV table equals the single run's")
    # the merged file reads from another working folder, and after moving
    # the folder with its shards (sources are stored relative to it)
    moved = os.path.join(d, "moved")
    os.makedirs(moved)
    os.rename(merged, os.path.join(moved, "merged.h5"))
    os.rename(os.path.join(d, "shards"), os.path.join(moved, "shards"))
    r = subprocess.run(["/usr/bin/python3", "-c",
                        "import h5py,numpy as np,sys; f=h5py.File(sys.argv[1]); a=f['phase'][...]; "
                        "print(int(np.isfinite(a).all()), a.shape[0])", os.path.join(moved, "merged.h5")],
                       capture_output=True, text=True, cwd="/")
    expect(r.stdout.split() == ["1", "10"], f"moved merged file still reads every frame: {r.stdout} {r.stderr}")
    shards = [os.path.join(moved, "shards", f"part{k}.h5") for k in range(3)]
    # overlap and gap are refused, naming the shards
    over = os.path.join(d, "over.h5")
    code, _, err = run(binary, "run", p, "-q", "--frames", "3:5", "-o", over)
    code, _, err = run(binary, "merge", os.path.join(d, "bad.h5"), shards[0], over, shards[1], shards[2])
    expect(code == 3 and "overlap" in err and "over.h5" in err, f"overlapping shards refused: {code} {err.strip()}")
    code, _, err = run(binary, "merge", os.path.join(d, "bad.h5"), shards[0], shards[2])
    expect(code == 3 and "gap" in err and "part0.h5" in err, f"a gap is refused: {code} {err.strip()}")
    expect(not os.path.exists(os.path.join(d, "bad.h5")), "a refused merge writes nothing")
    other = write(d, "o.toml", text.replace("alpha = 0.2", "alpha = 0.3"))
    o = os.path.join(d, "o.h5")
    run(binary, "run", other, "-q", "--frames", "4:7", "-o", o)
    code, _, err = run(binary, "merge", os.path.join(d, "bad.h5"), shards[0], o, shards[2])
    expect(code == 3 and "another pipeline" in err, f"shards of another pipeline refused: {code} {err.strip()}")
    code, _, err = run(binary, "merge", os.path.join(d, "bad.h5"), shards[0] + ".partial")
    expect(code == 3, f"a partial shard is refused: {code} {err.strip()}")

    # the ready cluster job script, run here as its array tasks 0-2 and then
    # its merge job (tools/cluster/wavestack-shards.sbatch)
    script = os.path.join(os.path.dirname(__file__), "..", "..", "tools", "cluster", "wavestack-shards.sbatch")
    job = os.path.join(d, "job")
    env = dict(os.environ, WAVESTACK=binary, SLURM_CPUS_PER_TASK="2")
    for task in ("0", "1", "2"):
        r = subprocess.run(["bash", script, p, job, "10", "4"], env=dict(env, SLURM_ARRAY_TASK_ID=task),
                           capture_output=True, text=True)
        expect(r.returncode == 0, f"job script task {task} ({r.stderr.strip()})")
    r = subprocess.run(["bash", script, p, job, "10", "4"], env=dict(env, WAVESTACK_MERGE="1"),
                       capture_output=True, text=True)
    expect(r.returncode == 0, f"job script merge ({r.stderr.strip()})")
    est = os.path.join(d, "single-estimate.h5")
    run(binary, "run", p, "-q", "--set", "run.fft_planning=estimate", "-o", est)
    if os.path.exists(os.path.join(job, "merged.h5")):
        same_files(est, os.path.join(job, "merged.h5"), "job script result vs single run",
                   skip_attrs=("created", "merged_from", "frames_selected"))


CASES = {"kill": case_kill, "refuse": case_refuse, "shards": case_shards}

if __name__ == "__main__":
    main(CASES)
