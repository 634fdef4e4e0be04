#!/usr/bin/python3
"""Reference check of the demo data written by the demo generator
(datasets-demo/generator, e.g. `demo_smoke DIR --truth` or write_demo_data
with DemoScenario::write_truth = true).

usage: /usr/bin/python3 check_demo_data.py DIR [--frames K]

DIR holds holograms.h5, background.h5 and truth.h5 (/opd, /amplitude at
focus). The generator's physics is recomputed here in float64 numpy from the
truth maps and the recording attributes, independently of the C++ code:
  O0 = A exp(i 2 pi OPD / lambda0)       projection approximation
  pupil |f| <= NA/lambda0                coherent cutoff [common practice]
  exact angular spectrum over +defocus   Goodman 2005 ch. 3 [from memory]
    (both applied to the scattered part O0 - 1, the defocus on the next
    good FFT size; the unit plane wave takes exp(i 2 pi z n / lambda0))
  R = r exp(-i 2 pi (fcx x + fcy y)), I = E |R + O|^2 scaled to mean_level
                                         Cuche et al., Appl. Opt. 39(23)
                                         4070 (2000) [from memory]
  E = exp(-d^2 ln(1/(1 - vignetting)) / d_far^2) around illumination_centre
Checks:
  1. shapes, dtype, 12-bit range, attributes;
  2. noise-free data (attr noise = 0): every pixel within 1 DN of the
     numpy re-synthesis (float32 fields in C++ flip some roundings);
     noisy data: the residual divided by sqrt(gain * signal + read^2)
     (gain = full scale / full well) has mean 0 +- 0.02 and standard
     deviation 1 +- 0.03 over unclipped pixels, i.e. the noise model
     is Gaussian with variance proportional to the signal [common practice];
  3. the carrier: demodulating the background with the attribute carrier
     leaves a phase ramp below 0.01 bin;
  4. a numpy Fourier-transform reconstruction of frame 0 (Takeda et al.,
     JOSA 72(1) 156 (1982) [from memory]) divided by the background's,
     propagated by truth_refocus_distance, matches the pupil-limited truth
     field to 3 % (noise-limited) and its phase RMS error inside the objects
     is below 0.05 rad; without the refocus that phase error must be above
     0.05 rad and 5 x the refocused one (the scene is mostly clear medium,
     so the field-wide figure alone says little).
Exit status 0 = pass, 1 = fail.
"""

import argparse
import math
import os
import sys

import h5py
import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import offaxis_reference as ref  # noqa: E402


def attrs_of(ds):
    return {k: (v.decode() if isinstance(v, bytes) else v) for k, v in ds.attrs.items()}


def good_size(n):
    """Smallest n' >= n with prime factors in {2, 3, 5, 7} (the FFT sizes
    wavestack pads to, wavestack/fft/fft.hpp)."""
    m = n
    while True:
        k = m
        for p in (2, 3, 5, 7):
            while k % p == 0:
                k //= p
        if k == 1:
            return m
        m += 1


def envelope(h, w, d, a):
    fov_y, fov_x = h * d, w * d
    y0, x0 = a["illumination_centre"][0] * fov_y, a["illumination_centre"][1] * fov_x
    far2 = max((y - y0) ** 2 + (x - x0) ** 2 for y in (0, fov_y) for x in (0, fov_x))
    k = -math.log(1.0 - a["vignetting"]) / far2 if a["vignetting"] > 0 else 0.0
    yy = (np.arange(h) * d - y0)[:, None]
    xx = (np.arange(w) * d - x0)[None, :]
    return np.exp(-(yy * yy + xx * xx) * k)


def main():
    ap = argparse.ArgumentParser(description="check the demo data against a numpy re-synthesis")
    ap.add_argument("dir")
    ap.add_argument("--frames", type=int, default=2, help="frames to re-synthesise (default 2)")
    args = ap.parse_args()
    problems = []

    hp = os.path.join(args.dir, "holograms.h5")
    bp = os.path.join(args.dir, "background.h5")
    tp = os.path.join(args.dir, "truth.h5")
    for p in (hp, bp, tp):
        if not os.path.exists(p):
            raise ref.CheckFailed(f"{p} is missing (write the truth with DemoScenario::write_truth)")
    with h5py.File(hp, "r") as f, h5py.File(bp, "r") as g, h5py.File(tp, "r") as t:
        d, gb = f["holograms"], g["holograms"]
        a = attrs_of(d)
        n, h, w = d.shape
        print(f"holograms {d.shape} {d.dtype}, background {gb.shape} {gb.dtype}")
        if d.dtype != np.uint16 or gb.dtype != np.uint16:
            problems.append("the holograms are not uint16")
        if gb.shape != (1, h, w):
            problems.append(f"background shape {gb.shape}, expected (1, {h}, {w})")
        for k in ("wavelength", "camera_pixel_pitch", "object_pixel_pitch", "magnification",
                  "numerical_aperture", "medium_index", "carrier_frequency", "truth_defocus",
                  "truth_refocus_distance", "units", "bit_depth"):
            if k not in a:
                problems.append(f"/holograms has no attribute {k}")
        if problems:
            return ref.finish(problems)
        lam, na, nm = float(a["wavelength"]), float(a["numerical_aperture"]), float(a["medium_index"])
        dpx = float(a["camera_pixel_pitch"][1]) / float(a["magnification"])
        if abs(dpx - float(a["object_pixel_pitch"][1])) > 1e-15:
            problems.append("object_pixel_pitch != camera_pixel_pitch / magnification")
        fcy, fcx = (float(v) for v in a["carrier_frequency"])
        z = float(a["truth_defocus"])
        if float(a["truth_refocus_distance"]) != -z:
            problems.append("truth_refocus_distance != -truth_defocus")
        full = (1 << int(a["bit_depth"])) - 1
        frames = [d[k].astype(np.float64) for k in range(min(args.frames, n))]
        bg = gb[0].astype(np.float64)
        opd = [t["opd"][k].astype(np.float64) * 1e-9 for k in range(len(frames))]
        amp = [t["amplitude"][k].astype(np.float64) for k in range(len(frames))]
        vmax = int(np.max(d[...]))
        print(f"max value {vmax} (full scale {full}); mean of frame 0 {frames[0].mean():.1f} DN")
        if vmax > full:
            problems.append(f"values above {full}")

        # --- 2. re-synthesis -------------------------------------------------
        inst = ref.Instrument(wavelength=lam, camera_pitch=float(a["camera_pixel_pitch"][1]),
                              magnification=float(a["magnification"]), numerical_aperture=na,
                              medium_index=nm)
        car = ref.Carrier(fx=fcx, fy=fcy)
        rw = ref.reference_wave(h, w, dpx, dpx, car, float(a["reference_ratio"]))
        env = envelope(h, w, dpx, a)
        rr = float(a["reference_ratio"])
        scale = float(a["mean_level"]) * full / (env.mean() * (rr * rr + 1.0))
        gain = full / float(a["full_well"])
        pup = ref.pupil(h, w, dpx, dpx, na / lam)
        truths = []
        gh, gw = good_size(h), good_size(w)
        for k, (o, am) in enumerate(zip(opd, amp)):
            # the generator's order of operations: pupil and defocus act on
            # the scattered part O0 - 1, the plane wave takes exp(i k z); the
            # defocus runs on the next good FFT size (zero padding), as
            # wavestack::propagate::AngularSpectrum with pad_factor 1 does
            s0 = np.fft.ifft2(np.fft.fft2(am * np.exp(2j * np.pi * o / lam) - 1.0) * pup)
            truths.append(s0 + 1.0)
            buf = np.zeros((gh, gw), complex)
            buf[:h, :w] = s0
            sz = ref.propagate(buf, dpx, dpx, lam, nm, z, pad=1)[:h, :w]
            uz = sz + np.exp(2j * np.pi * z * nm / lam)
            model = scale * env * np.abs(rw + uz) ** 2
            if int(a["noise"]) == 0:
                want = np.clip(np.rint(model), 0, full)
                diff = np.abs(frames[k] - want)
                print(f"frame {k}: noise-free re-synthesis: max |diff| {diff.max():.0f} DN, "
                      f"{np.mean(diff > 0) * 100:.3f} % of pixels differ")
                if diff.max() > 1:
                    problems.append(f"frame {k}: the hologram differs from the re-synthesis by "
                                    f"{diff.max():.0f} DN")
            else:
                ok = (frames[k] > 0) & (frames[k] < full) & (model < full - 50)
                zres = (frames[k] - model)[ok] / np.sqrt(gain * model[ok] + float(a["read_noise"]) ** 2)
                print(f"frame {k}: normalised noise residual mean {zres.mean():+.4f}, "
                      f"std {zres.std():.4f} ({ok.mean() * 100:.2f} % of pixels used)")
                if abs(zres.mean()) > 0.02 or abs(zres.std() - 1) > 0.03:
                    problems.append(f"frame {k}: the noise does not follow the stated model")
        bgz = ref.propagate(np.fft.ifft2(np.fft.fft2(np.ones((h, w), complex)) * pup), dpx, dpx, lam, nm,
                            z, pad=1)

        # --- 3. carrier --------------------------------------------------------
        yy = (np.arange(h) * dpx)[:, None]
        xx = (np.arange(w) * dpx)[None, :]
        demod = (bg - bg.mean()) * np.exp(-2j * np.pi * (fcx * xx + fcy * yy))
        low = np.fft.ifft2(np.fft.fft2(demod) * ref.pupil(h, w, dpx, dpx, 0.1 * na / lam))
        c = low[h // 4:3 * h // 4, w // 4:3 * w // 4]
        ry = np.angle(np.sum(c[1:, :] * np.conj(c[:-1, :]))) * h / (2 * np.pi)
        rx = np.angle(np.sum(c[:, 1:] * np.conj(c[:, :-1]))) * w / (2 * np.pi)
        print(f"carrier attribute ({fcy * 1e-6:.4f}, {fcx * 1e-6:.4f}) um^-1 = bins "
              f"({fcy * h * dpx:.3f}, {fcx * w * dpx:.3f}); residual after demodulation "
              f"({ry:+.4f}, {rx:+.4f}) bins")
        if max(abs(ry), abs(rx)) > 0.01:
            problems.append("the background's carrier differs from the carrier attribute")
        m = ref.carrier_margins(inst, car)
        print(f"|fc| = {m['fc_over_cutoff']:.3f} NA/lambda0, zero-order gap {m['zero_order_gap'] * 1e-6:.3f}, "
              f"band margins ({m['nyquist_margin_y'] * 1e-6:.3f}, {m['nyquist_margin_x'] * 1e-6:.3f}) um^-1")
        if m["zero_order_gap"] <= 0 or min(m["nyquist_margin_x"], m["nyquist_margin_y"]) <= 0:
            problems.append("the carrier does not separate the orders")

        # --- 4. numpy reconstruction of frame 0 --------------------------------
        def sideband(img):
            dm = (img - img.mean()) * np.exp(-2j * np.pi * (fcx * xx + fcy * yy))
            return np.fft.ifft2(np.fft.fft2(dm) * pup)
        u = sideband(frames[0]) / sideband(bg) * bgz    # background division: reference, envelope
        region = np.zeros((h, w))
        region[h // 8:h - h // 8, w // 8:w - w // 8] = 1
        gy, gx = np.meshgrid(np.arange(h) * dpx, np.arange(w) * dpx, indexing="ij")
        errs = {}
        for label, field in (("refocused", ref.propagate(u, dpx, dpx, lam, nm, -z, pad=1)),
                             ("not refocused", u)):
            ratio = field / truths[0]
            cc = np.sum(region * ratio * np.abs(truths[0]) ** 2) / np.sum(region * np.abs(truths[0]) ** 2)
            err = np.sqrt(np.sum(region * np.abs(field - cc * truths[0]) ** 2) /
                          np.sum(region * np.abs(cc * truths[0]) ** 2))
            inside = (opd[0] > 20e-9) & (region > 0)
            dph = ref.wrap(np.angle(field) - np.angle(truths[0]) - np.angle(cc))
            rms = float(np.sqrt(np.mean(dph[inside] ** 2)))
            print(f"frame 0 {label}: complex field error {100 * err:.2f} %, phase rms inside the "
                  f"objects {rms:.4f} rad")
            errs[label] = rms
            if label == "refocused":
                if err > 0.03:
                    problems.append(f"refocused demo field error {100 * err:.2f} % > 3 %")
                if rms > 0.05:
                    problems.append(f"refocused demo phase error {rms:.4f} rad > 0.05")
            elif rms < max(0.05, 5 * errs["refocused"]):
                problems.append(f"the demo is hardly defocused (phase rms {rms:.3f} rad without refocus)")
        del gy, gx
    return ref.finish(problems)


if __name__ == "__main__":
    ref.main_guard(main)
