"""Shared pieces of the end-to-end reference checks check_reconstruction.py and
check_refocus.py: an independent float64 numpy synthesis of off-axis
holograms, a pure-numpy Fourier-transform reconstruction used by --selfcheck,
the pipeline file writer, the wavestack runner and the output reader.

Nothing here imports wavestack code: every number is recomputed from the
published formulas named below.

Sources and status tags (see shared/REFERENCES.md (the project's shared notes)):
  * Fourier-transform fringe demodulation: M. Takeda, H. Ina, S. Kobayashi,
    JOSA 72(1), 156-160 (1982) [from memory].
  * Off-axis digital holographic microscopy, spatial filtering of the +1
    order and the separation condition |fc| >= 3 * (object bandwidth
    radius): E. Cuche, P. Marquet, C. Depeursinge, Appl. Opt. 39(23),
    4070-4075 (2000) [from memory].
  * Exact angular spectrum transfer function
    H = exp(i 2 pi z sqrt((n/lambda0)^2 - fx^2 - fy^2)), evanescent part set
    to zero: Goodman, Introduction to Fourier Optics, 3rd ed. (2005), ch. 3
    [from memory].
  * Band limit u_limit = 1/(lambda sqrt((2 du z)^2 + 1)): Matsushima &
    Shimobaba, Opt. Express 17(22), 19662 (2009) [from memory].
  * Coherent cutoff of an objective NA/lambda0 [common practice].
  * Sign conventions: numpy.fft.fft2 uses exp(-2 pi i jk/n) like FFTW
    FFTW_FORWARD; numpy.fft.fftfreq layout [confirmed in REFERENCES.md].
  * h5py maps a compound {r: f32, i: f32} to complex64 [common practice;
    h5py default complex_names = ('r', 'i')].
  * Water index, Daimon & Masumura, Appl. Opt. 46, 3811 (2007): 1.33538 at
    532 nm, 20 C, absolute [confirmed coefficients; value derived].
"""

from __future__ import annotations

import math
import os
import subprocess
import sys
import dataclasses
from dataclasses import dataclass

import h5py
import numpy as np


# ---------------------------------------------------------------------------
# instrument of the checks (an invented 25x/0.40 microscope at 532 nm)
# ---------------------------------------------------------------------------

@dataclass
class Instrument:
    wavelength: float = 532e-9        # m, vacuum
    camera_pitch: float = 4.8e-6      # m
    magnification: float = 25.0
    numerical_aperture: float = 0.40
    medium_index: float = 1.33538     # water at 532 nm (Daimon & Masumura) [derived]

    @property
    def dx(self) -> float:
        """Object-space pixel pitch (DESIGN.md physical model)."""
        return self.camera_pitch / self.magnification

    @property
    def cutoff(self) -> float:
        """Coherent cutoff NA/lambda0 in cycles/m [common practice]."""
        return self.numerical_aperture / self.wavelength

    def toml(self) -> str:
        return (
            "[instrument]\n"
            f'wavelength = "{self.wavelength * 1e9:.6g} nm"\n'
            f'pixel_pitch = "{self.camera_pitch * 1e6:.6g} um"\n'
            f"magnification = {self.magnification:.6g}\n"
            f"numerical_aperture = {self.numerical_aperture:.6g}\n"
            f"medium_index = {self.medium_index:.6g}\n"
        )


@dataclass
class Carrier:
    """Off-axis carrier in object-space spatial frequency (cycles/m)."""
    fx: float
    fy: float

    def bins(self, h: int, w: int, dy: float, dx: float) -> tuple[float, float]:
        return self.fy * h * dy, self.fx * w * dx


# Carrier of both checks on 600 x 720 frames, dx = 192 nm (object space):
# |fc| = 2.3746 um^-1 = 3.16 NA/lambda0 (> 3: the +1 lobe of radius
# NA/lambda0 = 0.752 um^-1 clears the |O|^2 term of radius 2 NA/lambda0,
# Cuche 2000; 3.16 > 3.1 also keeps a mask with a 10 % soft edge clear of
# it), fx + 1.1 NA/lambda0 = 2.530 < 2.604 um^-1 = 1/(2 dx) on each axis;
# FFT bins (y, x) = (190.70, 235.35): non-integer on purpose [derived].
CHECK_CARRIER_FX = 1.70247e6
CHECK_CARRIER_FY = 1.65538e6


def carrier_margins(inst: Instrument, car: Carrier) -> dict:
    """Separation figures of the +1 lobe (radius NA/lambda0) [derived].

    * the lobe must clear the |O|^2 autocorrelation (radius 2 NA/lambda0):
      |fc| - NA/lambda0 > 2 NA/lambda0, i.e. |fc| > 3 NA/lambda0 (Cuche 2000);
    * the lobe must stay inside the band on each axis:
      |fc_axis| + NA/lambda0 < 1/(2 dx).
    """
    r = inst.cutoff
    nyq = 1.0 / (2.0 * inst.dx)
    fc = math.hypot(car.fx, car.fy)
    return {
        "fc": fc,
        "fc_over_cutoff": fc / r,
        "zero_order_gap": fc - 3.0 * r,
        "nyquist_margin_x": nyq - (abs(car.fx) + r),
        "nyquist_margin_y": nyq - (abs(car.fy) + r),
        "radius_fraction": r / fc,
    }


# ---------------------------------------------------------------------------
# numpy optics, float64 / complex128
# ---------------------------------------------------------------------------

def freq_grids(h: int, w: int, dy: float, dx: float):
    fy = np.fft.fftfreq(h, dy)[:, None]
    fx = np.fft.fftfreq(w, dx)[None, :]
    return fy, fx


def pupil(h: int, w: int, dy: float, dx: float, cutoff: float) -> np.ndarray:
    """Hard circular pupil |f| <= cutoff in FFT bin order [common practice]."""
    fy, fx = freq_grids(h, w, dy, dx)
    return (fx * fx + fy * fy <= cutoff * cutoff).astype(np.float64)


def asm_transfer(h: int, w: int, dy: float, dx: float, wavelength: float,
                 medium_index: float, z: float, band_limit: bool = True) -> np.ndarray:
    """Exact angular spectrum transfer function (Goodman 2005, ch. 3)
    H = exp(i 2 pi z sqrt((n/l0)^2 - fx^2 - fy^2)), evanescent part = 0, with
    the Matsushima & Shimobaba (2009) band limit for the window h*dy, w*dx
    [from memory]."""
    fy, fx = freq_grids(h, w, dy, dx)
    k2 = (medium_index / wavelength) ** 2 - fx * fx - fy * fy
    prop = k2 > 0
    kz = np.sqrt(np.where(prop, k2, 0.0))
    tf = np.where(prop, np.exp(2j * np.pi * z * kz), 0.0)
    if band_limit and z != 0.0:
        lam = wavelength / medium_index
        dfx = 1.0 / (w * dx)
        dfy = 1.0 / (h * dy)
        ux = 1.0 / (lam * math.sqrt((2.0 * dfx * z) ** 2 + 1.0))
        uy = 1.0 / (lam * math.sqrt((2.0 * dfy * z) ** 2 + 1.0))
        tf = tf * ((np.abs(fx) <= ux) & (np.abs(fy) <= uy))
    return tf


def propagate(u: np.ndarray, dy: float, dx: float, wavelength: float,
              medium_index: float, z: float, pad: int = 1) -> np.ndarray:
    """Angular spectrum propagation of a complex field over z (m).

    pad = 1: periodic (no padding). This is exact for a field whose
    scattered part stays away from the frame edges over the distance z and
    whose background is a plane wave on the FFT grid (used for synthesis).
    pad = 2: zero padding to twice the size against wrap-around, as a
    reconstruction of an unknown field must do (used by the self-check)."""
    h, w = u.shape
    if pad > 1:
        ph, pw = pad * h, pad * w
        buf = np.zeros((ph, pw), dtype=np.complex128)
        buf[:h, :w] = u
    else:
        ph, pw = h, w
        buf = u.astype(np.complex128)
    tf = asm_transfer(ph, pw, dy, dx, wavelength, medium_index, z)
    out = np.fft.ifft2(np.fft.fft2(buf) * tf)
    return out[:h, :w]


def reference_wave(h: int, w: int, dy: float, dx: float, car: Carrier,
                   amplitude: float) -> np.ndarray:
    """Plane reference R = a exp(-i 2 pi (fcx x + fcy y)), x = j dx, y = i dy.
    Then O R* = a O exp(+i 2 pi fc.r): the +1 order (DESIGN.md: the peak with
    fx > 0) is O R* and sits at +fc in the hologram spectrum [derived]."""
    y = (np.arange(h) * dy)[:, None]
    x = (np.arange(w) * dx)[None, :]
    return amplitude * np.exp(-2j * np.pi * (car.fx * x + car.fy * y))


def record(obj: np.ndarray, ref: np.ndarray) -> np.ndarray:
    """Hologram intensity I = |R + O|^2 [Cuche 2000; from memory]."""
    return np.abs(ref + obj) ** 2


def to_counts(intensity: np.ndarray, mean_counts: float, rng, gain_dn_per_e: float,
              read_noise_dn: float, full_scale: int = 4095) -> np.ndarray:
    """Scale so the mean is `mean_counts`, add shot noise (Gaussian with
    variance gain * signal, the large-count limit of Poisson statistics) and
    read noise, round and clip to 12 bits [common practice]."""
    s = intensity * (mean_counts / float(np.mean(intensity)))
    noisy = s + rng.standard_normal(s.shape) * np.sqrt(gain_dn_per_e * s + read_noise_dn ** 2)
    return np.clip(np.rint(noisy), 0, full_scale).astype(np.uint16)


# ---------------------------------------------------------------------------
# files
# ---------------------------------------------------------------------------

def write_stack(path: str, stack: np.ndarray, inst: Instrument) -> None:
    with h5py.File(path, "w") as f:
        d = f.create_dataset("holograms", data=stack, chunks=(1,) + stack.shape[1:])
        d.attrs["description"] = "synthetic off-axis holograms (generated by tests/reference)"
        d.attrs["wavelength"] = inst.wavelength
        d.attrs["camera_pixel_pitch"] = np.array([inst.camera_pitch, inst.camera_pitch])


def write_pipeline(path: str, inst: Instrument, distance_um: float,
                   products=("field", "amplitude", "phase", "opd"),
                   input_name: str = "holograms.h5",
                   output_name: str = "reconstruction.h5") -> str:
    """Pipeline file after the DESIGN.md contract; relative paths are relative
    to the folder of the pipeline file."""
    prods = ", ".join(f'"{p}"' for p in products)
    text = (
        "# written by tests/reference/offaxis_reference.py\n"
        "[input]\n"
        f'path = "{input_name}"\n'
        'dataset = "/holograms"\n\n'
        + inst.toml() +
        "\n[[stage]]\n"
        'type = "fringe"\n'
        'dc = "mean"\n\n'
        "[[stage]]\n"
        'type = "sideband"\n'
        'order = "+1"\n\n'
        "[[stage]]\n"
        'type = "propagate"\n'
        f'distance = "{distance_um:g} um"\n\n'
        "[output]\n"
        f'path = "{output_name}"\n'
        f"products = [{prods}]\n"
    )
    with open(path, "w", encoding="utf-8") as f:
        f.write(text)
    return text


def run_wavestack(binary: str, pipeline: str, out: str | None = None,
                  timeout: float = 120.0) -> None:
    """Run `wavestack run PIPELINE.toml [-o OUT.h5] --quiet` (DESIGN.md
    command line). Raises CheckFailed on a non-zero exit status."""
    cmd = [binary, "run", pipeline, "--quiet"]
    if out is not None:
        cmd += ["-o", out]
    print("running:", " ".join(cmd))
    try:
        p = subprocess.run(cmd, capture_output=True, text=True, timeout=timeout)
    except FileNotFoundError:
        raise CheckFailed(f"cannot run {binary}: no such program")
    except subprocess.TimeoutExpired:
        raise CheckFailed(f"wavestack did not finish within {timeout:.0f} s")
    if p.stdout.strip():
        print(p.stdout.rstrip())
    if p.returncode != 0:
        raise CheckFailed(f"wavestack exited with status {p.returncode}: {p.stderr.strip()}")


class CheckFailed(Exception):
    pass


@dataclass
class Output:
    field: np.ndarray
    amplitude: np.ndarray
    phase: np.ndarray
    opd: np.ndarray
    pitch: tuple[float, float]          # (dy', dx') in m, from /phase
    attrs: dict = dataclasses.field(default_factory=dict)   # dataset name -> attrs dict
    root: dict = dataclasses.field(default_factory=dict)


def _attrs(obj) -> dict:
    out = {}
    for k, v in obj.attrs.items():
        if isinstance(v, bytes):
            v = v.decode("utf-8", "replace")
        out[k] = v
    return out


def read_output(path: str) -> Output:
    """Read the products of an output file (DESIGN.md output contract)."""
    if not os.path.exists(path):
        raise CheckFailed(f"{path}: no output file was written")
    with h5py.File(path, "r") as f:
        for name in ("field", "amplitude", "phase", "opd"):
            if name not in f:
                raise CheckFailed(f"{path}: dataset /{name} is missing")
        fld = f["field"][...]
        if not np.iscomplexobj(fld):
            raise CheckFailed(f"{path}: /field is {fld.dtype}, expected compound {{r, i}} f32")
        attrs = {n: _attrs(f[n]) for n in ("field", "amplitude", "phase", "opd")}
        pitch = np.asarray(attrs["phase"].get("pixel_pitch", [np.nan, np.nan]), dtype=np.float64)
        return Output(field=fld.astype(np.complex128),
                      amplitude=f["amplitude"][...].astype(np.float64),
                      phase=f["phase"][...].astype(np.float64),
                      opd=f["opd"][...].astype(np.float64),
                      pitch=(float(pitch[0]), float(pitch[1])),
                      attrs=attrs, root=_attrs(f))


# ---------------------------------------------------------------------------
# pure-numpy Fourier-transform reconstruction (--selfcheck)
# ---------------------------------------------------------------------------

def numpy_reconstruct(stack: np.ndarray, inst: Instrument, distance: float):
    """Takeda et al. (1982) / Cuche et al. (2000) Fourier-transform method:
    subtract the mean, FFT, take the strongest peak with fx > 0 outside the
    zero order (integer bin, deliberately naive: the residual sub-bin carrier
    remains as a phase tilt), keep a circle of radius NA/lambda0 around it,
    move it to the centre into a smaller ch x cw spectrum, inverse FFT. The
    crop keeps the field of view with a coarser pitch: output pixel j is
    centred at j * (W dx / cw). Then angular spectrum propagation with 2x
    zero padding. Returns (field stack, (dy', dx'))."""
    n, h, w = stack.shape
    dy = dx = inst.dx
    r = inst.cutoff
    fy, fx = freq_grids(h, w, dy, dx)
    # crop: an even size holding the lobe diameter with ~10% margin
    ch = 2 * int(math.ceil(1.1 * r * h * dy))
    cw = 2 * int(math.ceil(1.1 * r * w * dx))
    ky = np.fft.fftfreq(ch, 1.0 / ch).astype(int)   # signed bins -ch/2 .. ch/2-1
    kx = np.fft.fftfreq(cw, 1.0 / cw).astype(int)
    out = np.empty((n, ch, cw), dtype=np.complex128)
    search = (fx > 0) & (fx * fx + fy * fy > (2.0 * r) ** 2)
    for t in range(n):
        holo = stack[t].astype(np.float64)
        spec = np.fft.fft2(holo - holo.mean())
        mag = np.where(search, np.abs(spec), 0.0)
        py, px = np.unravel_index(int(np.argmax(mag)), mag.shape)
        sy = py if py < h // 2 else py - h   # signed peak bins
        sx = px if px < w // 2 else px - w
        rows = (sy + ky) % h
        cols = (sx + kx) % w
        sub = spec[np.ix_(rows, cols)]
        fky = (ky / (h * dy))[:, None]
        fkx = (kx / (w * dx))[None, :]
        sub = sub * (fkx * fkx + fky * fky <= r * r)
        u = np.fft.ifft2(sub) * (ch * cw) / (h * w)
        if distance != 0.0:
            u = propagate(u, h * dy / ch, w * dx / cw, inst.wavelength,
                          inst.medium_index, distance, pad=2)
        out[t] = u
    return out, (h * dy / ch, w * dx / cw)


def write_mock_output(path: str, fields: np.ndarray, pitch, inst: Instrument,
                      plane: float) -> None:
    """Write a file in the DESIGN.md output layout from a numpy result, so
    that --selfcheck exercises the same reader as a real run."""
    phase = np.angle(fields)
    with h5py.File(path, "w") as f:
        f.attrs["format"] = "wavestack"
        f.attrs["format_version"] = 1
        items = {
            "field": (fields.astype(np.complex64), "1"),
            "amplitude": (np.abs(fields).astype(np.float32), "1"),
            "phase": (phase.astype(np.float32), "rad"),
            "opd": ((phase * inst.wavelength / (2 * np.pi) * 1e9).astype(np.float32), "nm"),
        }
        for name, (data, units) in items.items():
            d = f.create_dataset(name, data=data, chunks=(1,) + data.shape[1:])
            d.attrs["units"] = units
            d.attrs["pixel_pitch"] = np.array(pitch, dtype=np.float64)
            d.attrs["wavelength"] = inst.wavelength
            d.attrs["medium_index"] = inst.medium_index
            d.attrs["plane"] = plane
        f["phase"].attrs["wrapped"] = 1
        f.create_dataset("frames/index", data=np.arange(fields.shape[0], dtype=np.int64))
        f.create_dataset("frames/done", data=np.ones(fields.shape[0], dtype=np.uint8))


# ---------------------------------------------------------------------------
# comparisons
# ---------------------------------------------------------------------------

def fit_ramp(ratio: np.ndarray, weight: np.ndarray, yy: np.ndarray, xx: np.ndarray):
    """Best linear phase ramp exp(i(gy y + gx x)) and complex factor c such
    that ratio ~ c exp(i(gy y + gx x)), weighted. The ramp comes from the mean
    phase difference between neighbours (robust against wrapping), then is
    refined by a weighted least-squares plane fit of the residual phase.
    Returns (c, gy, gx) with gy, gx in rad/m."""
    wy = weight[1:, :] * weight[:-1, :]
    wx = weight[:, 1:] * weight[:, :-1]
    dyp = yy[1, 0] - yy[0, 0]
    dxp = xx[0, 1] - xx[0, 0]
    gy = np.angle(np.sum(wy * ratio[1:, :] * np.conj(ratio[:-1, :]))) / dyp
    gx = np.angle(np.sum(wx * ratio[:, 1:] * np.conj(ratio[:, :-1]))) / dxp
    for _ in range(2):
        res = ratio * np.exp(-1j * (gy * yy + gx * xx))
        c = np.sum(weight * res) / np.sum(weight)
        ph = np.angle(res * np.conj(c) / abs(c))
        a = np.stack([np.ones_like(ph), yy, xx], axis=-1)[weight > 0]
        sw = np.sqrt(weight[weight > 0])
        sol, *_ = np.linalg.lstsq(a * sw[:, None], ph[weight > 0] * sw, rcond=None)
        gy += sol[1]
        gx += sol[2]
    res = ratio * np.exp(-1j * (gy * yy + gx * xx))
    c = np.sum(weight * res) / np.sum(weight)
    return c, gy, gx


def wrap(p):
    return np.angle(np.exp(1j * p))


def check_common_attrs(out: Output, inst: Instrument, shape_in, plane: float,
                       problems: list) -> None:
    """Contract attributes: pitch = (H dy / ch, W dx / cw), wavelength,
    medium_index, plane, units, and /opd = phase lambda0 / (2 pi) in nm."""
    n, h, w = shape_in
    nn, ch, cw = out.phase.shape
    if nn != n:
        problems.append(f"/phase has {nn} frames, expected {n}")
    want = (h * inst.dx / ch, w * inst.dx / cw)
    print(f"output grid: {ch} x {cw}, pixel_pitch attr = [{out.pitch[0]:.6e}, {out.pitch[1]:.6e}] m, "
          f"expected H*dy/ch, W*dx/cw = [{want[0]:.6e}, {want[1]:.6e}] m")
    for got, exp, axis in ((out.pitch[0], want[0], "dy"), (out.pitch[1], want[1], "dx")):
        if not (abs(got - exp) <= 1e-9 * exp):
            problems.append(f"/phase pixel_pitch {axis} = {got:.9e} m, expected {exp:.9e} m")
    units = {"field": "1", "amplitude": "1", "phase": "rad", "opd": "nm"}
    for name, u in units.items():
        a = out.attrs[name]
        if a.get("units") != u:
            problems.append(f"/{name} units = {a.get('units')!r}, expected {u!r}")
        wl = float(np.asarray(a.get("wavelength", np.nan)))
        if not abs(wl - inst.wavelength) <= 1e-12 * inst.wavelength:
            problems.append(f"/{name} wavelength = {wl}, expected {inst.wavelength}")
        mi = float(np.asarray(a.get("medium_index", np.nan)))
        if not abs(mi - inst.medium_index) <= 1e-9:
            problems.append(f"/{name} medium_index = {mi}, expected {inst.medium_index}")
        pl = float(np.asarray(a.get("plane", np.nan)))
        if not abs(pl - plane) <= 1e-12:
            problems.append(f"/{name} plane = {pl} m, expected {plane} m")
    if int(np.asarray(out.attrs["phase"].get("wrapped", -1))) != 1:
        problems.append(f"/phase wrapped = {out.attrs['phase'].get('wrapped')!r}, expected 1 (no unwrap stage)")
    if out.root.get("format") != "wavestack" or int(out.root.get("format_version", -1)) != 1:
        problems.append(f"root attrs format/format_version = {out.root.get('format')!r}/"
                        f"{out.root.get('format_version')!r}, expected 'wavestack'/1")
    # /opd in nm is phase * lambda0 / (2 pi) (optical path, vacuum wavelength)
    opd_want = out.phase * inst.wavelength / (2 * np.pi) * 1e9
    err = float(np.max(np.abs(out.opd - opd_want)))
    tol = 1e-5 * float(np.max(np.abs(opd_want))) + 1e-3     # float32 rounding
    print(f"/opd vs phase*lambda0/(2 pi): max |diff| = {err:.3e} nm (tolerance {tol:.3e} nm)")
    if not err <= tol:
        problems.append(f"/opd differs from phase*lambda0/(2 pi) by up to {err:.3e} nm")
    # products must agree with each other: amplitude = |field|, phase = arg(field)
    amp_err = float(np.max(np.abs(np.abs(out.field) - out.amplitude) /
                           (np.max(out.amplitude) + 1e-30)))
    ph_err = float(np.max(np.abs(wrap(np.angle(out.field) - out.phase)) * (np.abs(out.field) > 1e-3 * np.max(np.abs(out.field)))))
    print(f"consistency: max | |field| - amplitude | / max amplitude = {amp_err:.2e}, "
          f"max |arg field - phase| = {ph_err:.2e} rad")
    if amp_err > 1e-5:
        problems.append(f"/amplitude differs from |/field| (relative {amp_err:.2e})")
    if ph_err > 1e-4:
        problems.append(f"/phase differs from arg(/field) by up to {ph_err:.2e} rad")


def check_arguments(doc: str):
    """Command line shared by the end-to-end checks: WAVESTACK | --selfcheck,
    --keep DIR, --max-ramp BINS."""
    import argparse
    ap = argparse.ArgumentParser(description=doc.split("\n")[1])
    ap.add_argument("wavestack", nargs="?", help="path of the wavestack program")
    ap.add_argument("--selfcheck", action="store_true",
                    help="reconstruct with the numpy reference instead of wavestack")
    ap.add_argument("--keep", metavar="DIR", help="write the files into DIR and keep them")
    ap.add_argument("--max-ramp", type=float, default=None, metavar="BINS",
                    help="largest residual carrier ramp accepted, in output bins (default 0.6: "
                         "the crop is centred on the nearest bin; a sideband stage that removes the "
                         "sub-bin carrier leaves a few hundredths)")
    args = ap.parse_args()
    if not args.selfcheck and not args.wavestack:
        ap.error("give the wavestack program, or --selfcheck")
    return args


def finish(problems: list) -> int:
    if problems:
        for p in problems:
            print("FAIL:", p)
        return 1
    print("PASS")
    return 0


def main_guard(fn):
    try:
        sys.exit(fn())
    except CheckFailed as e:
        print("FAIL:", e)
        sys.exit(1)
