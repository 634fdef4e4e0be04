#!/usr/bin/python3
"""End-to-end reference check: off-axis hologram -> phase, at the recording
plane (propagate distance "0 um").

usage: /usr/bin/python3 check_reconstruction.py WAVESTACK_BINARY [--keep DIR] [--max-ramp BINS]
       /usr/bin/python3 check_reconstruction.py --selfcheck [--keep DIR]

An independent float64 numpy synthesis (Takeda, Ina & Kobayashi, JOSA 72(1)
156 (1982); Cuche, Marquet & Depeursinge, Appl. Opt. 39(23) 4070 (2000))
[from memory] of three 600 x 720 frames (non-square, not powers of two) of a
smooth, moving phase-and-amplitude object, recorded with a diagonal carrier
at non-integer FFT bins into 12-bit uint16 with shot and read noise. The
pipeline file (fringe -> sideband +1 -> propagate 0 um) is run by wavestack
(or, with --selfcheck, by the pure-numpy reconstruction of
offaxis_reference.py, which writes a file in the same output layout).

Checks:
  * RMS phase error inside the object < 0.02 rad, after removing piston and
    a linear ramp (the residual sub-bin carrier: the contract does not say
    that the sideband stage removes it; the ramp itself must stay below 0.6
    output bins, i.e. the crop was centred on the nearest carrier bin, or
    below --max-ramp for a stage that removes the sub-bin carrier; the
    wavestack sideband stage leaves about 0.03 bin here, its carrier being
    estimated on a frame that holds the object);
  * RMS relative amplitude error inside the object < 0.02 (after one global
    scale: the contract does not fix the field's overall scale);
  * /phase pixel_pitch = [H dy / ch, W dx / cw] (the crop keeps the field of
    view with a coarser pitch), and the other contract attributes;
  * /opd = phase * lambda0 / (2 pi) in nm; amplitude = |field|,
    phase = arg(field).

Truth on the output grid: the crop keeps the field of view, so output pixel
(i, j) is centred at (i dy', j dx') with the same origin as input pixel
(0, 0) at (0, 0); the analytic object is evaluated there. The object is so
smooth that its spectrum lies far inside the NA/lambda0 sideband mask, so the
analytic values are also the band-limited values [derived].

Tolerances: the phase noise expected from the noise model is about
sigma_I / (a_r |O| scale) * sqrt(mask area / band area) / sqrt(2)
~ 0.007 rad per output pixel [derived; 0.007 measured by --selfcheck]; 0.02 rad leaves room for edge
leakage of the non-integer carrier and float32 arithmetic.

Exit status 0 = pass, 1 = fail. Deterministic (fixed seed); a few seconds.
"""

import os
import sys
import tempfile

import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import offaxis_reference as ref  # noqa: E402

N_FRAMES, H, W = 3, 600, 720
SEED = 20240611
INST = ref.Instrument()
CARRIER = ref.Carrier(fx=ref.CHECK_CARRIER_FX, fy=ref.CHECK_CARRIER_FY)  # margins: see there
REF_AMPLITUDE = 1.6          # |R| / |O| of the clear field: fringe visibility 0.90
MEAN_COUNTS = 1900.0         # DN, peaks (1 + 1.6)^2 / (1 + 1.6^2) * 1900 = 3610 < 4095
GAIN = 0.5                   # DN per photo-electron (shot-noise variance = GAIN * signal)
READ_NOISE = 1.5             # DN rms

PHASE_TOL = 0.02             # rad rms inside the object
AMP_TOL = 0.02               # relative rms inside the object
RAMP_LIMIT = 0.6             # output bins


def truth(yy, xx, t):
    """Analytic object of frame t at positions (yy, xx) in metres: returns
    (amplitude, phase). Two Gaussian phase bumps and a weak absorbing spot,
    drifting by (+0.9, -1.3) um per frame."""
    cy = 0.46 * H * INST.dx + 0.9e-6 * t
    cx = 0.54 * W * INST.dx - 1.3e-6 * t
    um = 1e-6
    g = lambda y0, x0, sy, sx: np.exp(-0.5 * (((yy - y0) / sy) ** 2 + ((xx - x0) / sx) ** 2))
    phase = (2.6 * g(cy, cx, 7 * um, 10 * um)
             + 1.2 * g(cy + 12 * um, cx - 15 * um, 2.5 * um, 2.5 * um))
    amp = 1.0 - 0.12 * g(cy - 10 * um, cx + 8 * um, 5 * um, 5 * um)
    return amp, phase


def synthesize():
    yy = (np.arange(H) * INST.dx)[:, None] * np.ones((1, W))
    xx = (np.arange(W) * INST.dx)[None, :] * np.ones((H, 1))
    rw = ref.reference_wave(H, W, INST.dx, INST.dx, CARRIER, REF_AMPLITUDE)
    rng = np.random.default_rng(SEED)
    frames = []
    for t in range(N_FRAMES):
        a, p = truth(yy, xx, t)
        inten = ref.record(a * np.exp(1j * p), rw)
        frames.append(ref.to_counts(inten, MEAN_COUNTS, rng, GAIN, READ_NOISE))
    return np.stack(frames)


def main():
    args = ref.check_arguments(__doc__)
    if args.max_ramp is not None:
        globals()["RAMP_LIMIT"] = args.max_ramp

    m = ref.carrier_margins(INST, CARRIER)
    by, bx = CARRIER.bins(H, W, INST.dx, INST.dx)
    print(f"carrier |fc| = {m['fc'] * 1e-6:.4f} um^-1 = {m['fc_over_cutoff']:.3f} NA/lambda0, "
          f"bins (y, x) = ({by:.3f}, {bx:.3f}); Nyquist margins (y, x) = "
          f"({m['nyquist_margin_y'] * 1e-6:.3f}, {m['nyquist_margin_x'] * 1e-6:.3f}) um^-1; "
          f"zero-order gap {m['zero_order_gap'] * 1e-6:.3f} um^-1")
    if m["zero_order_gap"] <= 0 or min(m["nyquist_margin_x"], m["nyquist_margin_y"]) <= 0:
        raise ref.CheckFailed("the test's own carrier does not separate the orders")

    stack = synthesize()
    clipped = float(np.mean((stack == 0) | (stack == 4095)))
    print(f"synthesised {stack.shape} uint16, mean {stack.mean():.1f} DN, "
          f"range {stack.min()}..{stack.max()}, clipped fraction {clipped:.2e}")

    with tempfile.TemporaryDirectory(prefix="ws-recon-") as tmp:
        work = args.keep or tmp
        os.makedirs(work, exist_ok=True)
        ref.write_stack(os.path.join(work, "holograms.h5"), stack, INST)
        pipe = os.path.join(work, "pipeline.toml")
        ref.write_pipeline(pipe, INST, 0.0)
        out_path = os.path.join(work, "reconstruction.h5")   # [output] path, relative to the pipeline
        if args.selfcheck:
            fields, pitch = ref.numpy_reconstruct(stack, INST, 0.0)
            ref.write_mock_output(out_path, fields, pitch, INST, 0.0)
            print("selfcheck: numpy reconstruction written to", out_path)
        else:
            if os.path.exists(out_path):
                os.remove(out_path)
            ref.run_wavestack(os.path.abspath(args.wavestack), pipe)
        out = ref.read_output(out_path)
        return compare(out, stack.shape)


def compare(out, shape_in):
    problems = []
    ref.check_common_attrs(out, INST, shape_in, 0.0, problems)
    n, ch, cw = out.phase.shape
    dyp, dxp = H * INST.dx / ch, W * INST.dx / cw     # the expected grid, not the attribute
    yy = (np.arange(ch) * dyp)[:, None] * np.ones((1, cw))
    xx = (np.arange(cw) * dxp)[None, :] * np.ones((ch, 1))
    central = np.zeros((ch, cw))
    my, mx = int(0.08 * ch), int(0.08 * cw)
    central[my:ch - my, mx:cw - mx] = 1.0
    worst_p = worst_a = 0.0
    for t in range(min(n, N_FRAMES)):
        a_t, p_t = truth(yy, xx, t)
        inside = (p_t > 0.1 * p_t.max()) & (central > 0)
        ratio = out.field[t] / (a_t * np.exp(1j * p_t))
        c, gy, gx = ref.fit_ramp(ratio, central, yy, xx)
        res = ratio * np.exp(-1j * (gy * yy + gx * xx)) / c
        # phase from /phase (the product under test), same ramp and piston
        dph = ref.wrap(out.phase[t] - p_t - (gy * yy + gx * xx) - np.angle(c))
        rms_p = float(np.sqrt(np.mean(dph[inside] ** 2)))
        rms_p_all = float(np.sqrt(np.mean(dph[central > 0] ** 2)))
        ampr = out.amplitude[t] / (a_t * abs(c)) - 1.0
        rms_a = float(np.sqrt(np.mean(ampr[inside] ** 2)))
        ramp_y = gy * H * INST.dx / (2 * np.pi)          # cycles over the field = output bins
        ramp_x = gx * W * INST.dx / (2 * np.pi)
        print(f"frame {t}: phase rms error inside object {rms_p:.4f} rad "
              f"(central region {rms_p_all:.4f} rad, complex residual "
              f"{float(np.sqrt(np.mean(np.abs(res[inside] - 1) ** 2))):.4f}); amplitude rms "
              f"{rms_a:.4f}; removed ramp ({ramp_y:+.3f}, {ramp_x:+.3f}) bins; "
              f"{int(inside.sum())} px inside")
        worst_p, worst_a = max(worst_p, rms_p), max(worst_a, rms_a)
        if not rms_p < PHASE_TOL:
            problems.append(f"frame {t}: phase rms error {rms_p:.4f} rad >= {PHASE_TOL}")
        if not rms_a < AMP_TOL:
            problems.append(f"frame {t}: amplitude rms error {rms_a:.4f} >= {AMP_TOL}")
        if max(abs(ramp_y), abs(ramp_x)) > RAMP_LIMIT:
            problems.append(f"frame {t}: residual carrier ramp ({ramp_y:+.3f}, {ramp_x:+.3f}) "
                            f"bins exceeds {RAMP_LIMIT}: the carrier was not removed to that precision")
    print(f"worst phase rms {worst_p:.4f} rad (tolerance {PHASE_TOL}), "
          f"worst amplitude rms {worst_a:.4f} (tolerance {AMP_TOL})")
    return ref.finish(problems)


if __name__ == "__main__":
    ref.main_guard(main)
