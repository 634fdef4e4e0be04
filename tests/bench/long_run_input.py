#!/usr/bin/python3
"""Input and output checks for tests/bench/run-long-run-check.sh.

  long_run_input.py make OUT.h5 FRAMES SIZE    write FRAMES off-axis holograms of SIZE x SIZE (uint16)
  long_run_input.py check OUT.h5 FRAMES        check a reconstruction of them; print the table size

The holograms are a load test, not a physics test: three smooth phase bumps
("cells", spherical-cap OPD profiles) drift on slow circles, are band-limited
to the objective's NA, defocused by +DEFOCUS with the angular spectrum
(common practice; Goodman, Introduction to Fourier Optics, ch. 3.10) and
interfere with a tilted plane reference wave; Gaussian read noise is added.
The numbers are those of calibration/demo-40x-0.75na.toml. Frames are stored
one per chunk, as a camera writes them.
"""
import sys

import h5py
import numpy as np

WAVELENGTH = 632.8e-9          # m, vacuum (profile)
PITCH = 3.45e-6 / 40.0         # m, object space (profile: camera pitch / magnification)
NA = 0.75
MEDIUM = 1.33211
DEFOCUS = 3e-6                 # m; the pipeline propagates by -DEFOCUS
CARRIER = (0.23, 0.26)         # cycles per pixel (fy, fx): |f| = 0.35 c/px > 3 NA/lambda = 0.31 c/px,
                               # so the sideband (radius NA/lambda = 0.10 c/px) clears the zero order
BLOCK = 250                    # frames generated and written at a time


def transfer(size):
    """Angular-spectrum transfer function for +DEFOCUS times the NA pupil."""
    f = np.fft.fftfreq(size, d=PITCH)
    fy, fx = np.meshgrid(f, f, indexing="ij")
    f2 = fx * fx + fy * fy
    k = MEDIUM / WAVELENGTH
    kz = np.sqrt(np.maximum(k * k - f2, 0.0))
    pupil = f2 <= (NA / WAVELENGTH) ** 2
    return np.where(pupil, np.exp(2j * np.pi * DEFOCUS * kz), 0)


def make(path, frames, size):
    rng = np.random.default_rng(20240611)
    h = transfer(size)
    y, x = np.mgrid[0:size, 0:size].astype(np.float64)
    # reference tilted so that field * conj(reference) sits at +CARRIER: the "+1" order (fx > 0)
    reference = np.exp(-2j * np.pi * (CARRIER[0] * y + CARRIER[1] * x))
    fov = size * PITCH
    # three cells: radius (m), peak OPD (nm), circle centre and radius (fractions of the FOV), period (frames)
    cells = [(0.11 * fov, 120.0, (0.35, 0.35), 0.06, 400.0),
             (0.08 * fov, 90.0, (0.65, 0.40), 0.05, 650.0),
             (0.09 * fov, 150.0, (0.50, 0.68), 0.04, 900.0)]
    yy, xx = y * PITCH, x * PITCH
    with h5py.File(path, "w") as f:
        d = f.create_dataset("holograms", (frames, size, size), dtype="u2", chunks=(1, size, size))
        for start in range(0, frames, BLOCK):
            n = min(BLOCK, frames - start)
            opd = np.zeros((n, size, size))
            t = np.arange(start, start + n, dtype=np.float64)[:, None, None]
            for radius, peak, (cy, cx), orbit, period in cells:
                py = (cy + orbit * np.sin(2 * np.pi * t / period)) * fov
                px = (cx + orbit * np.cos(2 * np.pi * t / period)) * fov
                r2 = ((yy - py) ** 2 + (xx - px) ** 2) / radius**2
                opd += peak * np.sqrt(np.maximum(1.0 - r2, 0.0))
            field = np.fft.ifft2(np.fft.fft2(np.exp(2j * np.pi * opd * 1e-9 / WAVELENGTH)) * h)
            holo = np.abs(reference + 0.8 * field) ** 2      # mean about 1.6; a few hot spots saturate, as on a camera
            counts = 9000.0 * holo + rng.normal(0.0, 40.0, holo.shape)
            d[start:start + n] = np.clip(np.rint(counts), 0, 65535).astype(np.uint16)


def check(path, frames):
    with h5py.File(path, "r") as f:
        errors = []
        for name in ("phase", "opd"):
            shape = f[name].shape
            if len(shape) != 3 or shape[0] != frames:
                errors.append(f"/{name} has shape {shape}, expected ({frames}, h, w)")
        done = f["frames/done"][:]
        if done.shape != (frames,) or not np.all(done == 1):
            errors.append(f"/frames/done: {int(np.count_nonzero(done == 1))} of {frames} frames are 1")
        index = f["frames/index"][:]
        if not np.array_equal(index, np.arange(frames)):
            errors.append("/frames/index is not 0..N-1")
        # spot-check a few frames spread over the run rather than reading 20 000
        for i in np.linspace(0, frames - 1, 9).astype(int):
            if not np.all(np.isfinite(f["opd"][i])):
                errors.append(f"/opd frame {i} has non-finite values")
        count = f["objects/count"][:]
        table = f["objects/mass"]
        rows = table.shape[0]
        if rows != int(count.sum()):
            errors.append(f"/objects/mass has {rows} rows but /objects/count sums to {int(count.sum())}")
        # the run keeps every table row in memory as doubles: the frame index plus the stage's columns
        columns = len(table.dtype.names)
        print(f"output: phase {f['phase'].shape} opd {f['opd'].shape}, frames done {int(done.sum())}/{frames}")
        print(f"table /objects/mass: {rows} rows ({rows / frames:.2f} per frame, objects per frame "
              f"{int(count.min())}..{int(count.max())}), {columns} columns, "
              f"{rows * columns * 8} bytes as doubles")
    for e in errors:
        print("check failed: " + e, file=sys.stderr)
    return 1 if errors else 0


if __name__ == "__main__":
    if len(sys.argv) == 5 and sys.argv[1] == "make":
        make(sys.argv[2], int(sys.argv[3]), int(sys.argv[4]))
    elif len(sys.argv) == 4 and sys.argv[1] == "check":
        sys.exit(check(sys.argv[2], int(sys.argv[3])))
    else:
        sys.exit(__doc__)
