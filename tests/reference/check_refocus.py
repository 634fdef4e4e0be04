#!/usr/bin/python3
"""End-to-end reference check: off-axis hologram of a defocused object ->
complex field refocused by the pipeline.

usage: /usr/bin/python3 check_refocus.py WAVESTACK_BINARY [--keep DIR] [--max-ramp BINS]
       /usr/bin/python3 check_refocus.py --selfcheck [--keep DIR]

Synthesis (numpy, float64): a phase-and-amplitude object at focus,
O0 = A exp(i phi), band-limited by the objective pupil |f| <= NA/lambda0
[common practice], propagated forward by DEFOCUS with the exact angular
spectrum transfer function (Goodman 2005, ch. 3; evanescent part zero)
[from memory], then recorded off-axis (Cuche, Marquet & Depeursinge, Appl.
Opt. 39(23) 4070 (2000)) [from memory] into float32 frames of 600 x 720 with
a diagonal carrier at non-integer bins, no noise. The pipeline (fringe ->
sideband +1 -> propagate -DEFOCUS) must give back the focal field.

Comparison (why it is fair):
  * Truth = the pupil-limited focal field: everything the recording can
    carry. It is resampled onto the output grid exactly by cropping its
    spectrum to the output's ch x cw bins and inverse transforming (the
    field is band-limited inside the crop, so this is exact band-limited
    interpolation; output pixel (i, j) sits at (i dy', j dx'), the same
    origin as the input) [derived]. The script fails if the output crop
    cannot hold the pupil.
  * The field's overall complex scale is not fixed by the contract (it
    carries |R| and the stages' normalisation), so one best complex factor
    c = <U_true, U> / <U_true, U_true> is removed: the global phase theta =
    arg c and the scale |c|. A linear phase ramp (the residual sub-bin
    carrier left by the sideband stage) is removed as well and reported; it
    must stay below 0.6 output bins (or --max-ramp). A ramp at the recording plane also
    shifts the refocused field laterally by DEFOCUS * lambda * ramp; that
    error is NOT removed (the numpy self-check, which re-centres on the
    integer bin, measures its size).
  * error = ||U e^{-i ramp} - c U_true|| / ||c U_true|| over the central
    region (20% margins dropped on each side), must be < 1%. Two effects
    disturb the edges and are intrinsic to the method, not faults: the
    zero padding of the back-propagation (light that would come from
    outside the frame is missing), and, for a reconstruction that crops on
    the nearest integer bin, the spectral leakage of a carrier that is not
    periodic in the frame (the +1 lobe's sinc tails beyond the mask are
    lost: a Gibbs error decaying like 1/(pi^2 NA/lambda0 d) at distance d
    from the edge) [derived]. Measured with the numpy self-check: an
    integer-bin crop gives about 0.5 %, an exact sub-bin demodulation
    about 0.06 %, the unrefocused field about 12 %.
  * The same figure for the unrefocused field (truth at the recording
    plane against truth at focus) is printed to show that 1% discriminates.
  * The pupil rim energy (within 2 bins of NA/lambda0) is printed: a mask
    centred on the nearest bin instead of the exact carrier cuts only that.

Exit status 0 = pass, 1 = fail. Deterministic; a few seconds.
"""

import os
import sys
import tempfile

import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import offaxis_reference as ref  # noqa: E402

N_FRAMES, H, W = 2, 600, 720
INST = ref.Instrument()
DEFOCUS = 18e-6              # m; the hologram plane is 18 um beyond focus
CARRIER = ref.Carrier(fx=ref.CHECK_CARRIER_FX, fy=ref.CHECK_CARRIER_FY)  # margins: see there
REF_AMPLITUDE = 1.6
FIELD_TOL = 0.01
RAMP_LIMIT = 0.6
MARGIN = 0.20


SEED = 7
N_GRANULES = 100


def _granules():
    """Fixed-seed granule table: offsets (m) from the cell centre, widths (m),
    peak phases (rad), and absorption of every tenth granule."""
    rng = np.random.default_rng(SEED)
    off = rng.uniform(-1.0, 1.0, (N_GRANULES, 2)) * [0.33 * H * INST.dx, 0.33 * W * INST.dx]
    width = rng.uniform(0.7e-6, 1.2e-6, N_GRANULES)
    peak = rng.uniform(0.4, 1.0, N_GRANULES)
    absorb = np.where(np.arange(N_GRANULES) % 10 == 0, 0.2, 0.0)
    return off, width, peak, absorb


GRANULES = _granules()


def focal_object(t):
    """Object of frame t at focus on the input grid (before the pupil): a
    flat cell-like body (1.4 rad) covered with 100 granules 0.7-1.2 um wide
    (0.4-1.0 rad; every tenth absorbs 20 %), so that the comparison region
    is full of detail the defocus blurs. Drifts by (-0.7, +1.1) um per
    frame."""
    um = 1e-6
    yy = (np.arange(H) * INST.dx)[:, None]
    xx = (np.arange(W) * INST.dx)[None, :]
    cy = 0.52 * H * INST.dx - 0.7 * um * t
    cx = 0.47 * W * INST.dx + 1.1 * um * t
    phase = 1.4 * np.exp(-0.5 * (((yy - cy) / (9 * um)) ** 2 + ((xx - cx) / (13 * um)) ** 2))
    amp = np.ones_like(phase)
    for (oy, ox), s, p, a in zip(*GRANULES):
        g = np.exp(-0.5 * ((yy - cy - oy) ** 2 + (xx - cx - ox) ** 2) / (s * s))
        phase = phase + p * g
        if a:
            amp = amp * (1.0 - a * g)
    return amp * np.exp(1j * phase)


def truth_fields():
    """Pupil-limited focal fields and recorded-plane fields, input grid."""
    pup = ref.pupil(H, W, INST.dx, INST.dx, INST.cutoff)
    focal, recorded = [], []
    for t in range(N_FRAMES):
        u0 = np.fft.ifft2(np.fft.fft2(focal_object(t)) * pup)
        focal.append(u0)
        # periodic exact ASM: the background is a plane wave on the grid and
        # the object's light stays > 20 um from the edges over 18 um [derived]
        recorded.append(ref.propagate(u0, INST.dx, INST.dx, INST.wavelength,
                                      INST.medium_index, DEFOCUS, pad=1))
    return focal, recorded


def synthesize(recorded):
    rw = ref.reference_wave(H, W, INST.dx, INST.dx, CARRIER, REF_AMPLITUDE)
    return np.stack([(1000.0 * ref.record(u, rw)).astype(np.float32) for u in recorded])


def resample(u, ch, cw):
    """Band-limited resampling of an H x W field onto ch x cw samples of the
    same field of view: crop the spectrum to the signed bins of a ch x cw
    FFT (numpy.fft.fftfreq layout) and inverse transform [derived]."""
    ky = (np.fft.fftfreq(ch, 1.0 / ch)).astype(int) % H
    kx = (np.fft.fftfreq(cw, 1.0 / cw)).astype(int) % W
    return np.fft.ifft2(np.fft.fft2(u)[np.ix_(ky, kx)]) * (ch * cw) / (H * W)


def rel_error(u, truth, region, yy, xx):
    c, gy, gx = ref.fit_ramp(u / np.where(np.abs(truth) > 0, truth, 1), region * np.abs(truth) ** 2,
                             yy, xx)
    d = u * np.exp(-1j * (gy * yy + gx * xx)) - c * truth
    err = np.sqrt(np.sum(np.abs(d[region > 0]) ** 2) / np.sum(np.abs(c * truth[region > 0]) ** 2))
    return float(err), c, gy, gx


def main():
    args = ref.check_arguments(__doc__)
    if args.max_ramp is not None:
        globals()["RAMP_LIMIT"] = args.max_ramp

    focal, recorded = truth_fields()
    stack = synthesize(recorded)
    # rim energy of the pupil-limited truth
    fy, fx = ref.freq_grids(H, W, INST.dx, INST.dx)
    fr = np.sqrt(fx * fx + fy * fy)
    spec = np.abs(np.fft.fft2(focal[0] - focal[0].mean())) ** 2
    rim = (fr > INST.cutoff - 2.0 / (W * INST.dx)) & (fr <= INST.cutoff)
    print(f"defocus {DEFOCUS * 1e6:g} um, pipeline distance {-DEFOCUS * 1e6:g} um; "
          f"pupil rim energy (last 2 bins) / scattered energy = {spec[rim].sum() / spec.sum():.2e}")

    with tempfile.TemporaryDirectory(prefix="ws-refocus-") as tmp:
        work = args.keep or tmp
        os.makedirs(work, exist_ok=True)
        ref.write_stack(os.path.join(work, "holograms.h5"), stack, INST)
        pipe = os.path.join(work, "pipeline.toml")
        ref.write_pipeline(pipe, INST, -DEFOCUS * 1e6)
        out_path = os.path.join(work, "refocused.h5")      # given with -o
        if args.selfcheck:
            fields, pitch = ref.numpy_reconstruct(stack, INST, -DEFOCUS)
            ref.write_mock_output(out_path, fields, pitch, INST, -DEFOCUS)
            print("selfcheck: numpy reconstruction written to", out_path)
        else:
            if os.path.exists(out_path):
                os.remove(out_path)
            ref.run_wavestack(os.path.abspath(args.wavestack), pipe, out=out_path)
        out = ref.read_output(out_path)
        return compare(out, stack.shape, focal, recorded)


def compare(out, shape_in, focal, recorded):
    problems = []
    ref.check_common_attrs(out, INST, shape_in, -DEFOCUS, problems)
    n, ch, cw = out.field.shape
    if ch < 2 * INST.cutoff * H * INST.dx or cw < 2 * INST.cutoff * W * INST.dx:
        raise ref.CheckFailed(f"output crop {ch} x {cw} cannot hold the NA/lambda0 pupil "
                              f"({2 * INST.cutoff * H * INST.dx:.1f} x "
                              f"{2 * INST.cutoff * W * INST.dx:.1f} bins)")
    dyp, dxp = H * INST.dx / ch, W * INST.dx / cw
    yy = (np.arange(ch) * dyp)[:, None] * np.ones((1, cw))
    xx = (np.arange(cw) * dxp)[None, :] * np.ones((ch, 1))
    region = np.zeros((ch, cw))
    my, mx = int(MARGIN * ch), int(MARGIN * cw)
    region[my:ch - my, mx:cw - mx] = 1.0
    worst = 0.0
    for t in range(min(n, N_FRAMES)):
        u_true = resample(focal[t], ch, cw)
        err, c, gy, gx = rel_error(out.field[t], u_true, region, yy, xx)
        blur, *_ = rel_error(resample(recorded[t], ch, cw), u_true, region, yy, xx)
        ramp_y = gy * H * INST.dx / (2 * np.pi)
        ramp_x = gx * W * INST.dx / (2 * np.pi)
        print(f"frame {t}: refocused field error {100 * err:.3f} % (tolerance "
              f"{100 * FIELD_TOL:g} %), global phase {np.angle(c):+.3f} rad, scale {abs(c):.4g}, "
              f"removed ramp ({ramp_y:+.3f}, {ramp_x:+.3f}) bins; "
              f"unrefocused field would be {100 * blur:.1f} %")
        worst = max(worst, err)
        if not err < FIELD_TOL:
            problems.append(f"frame {t}: refocused field error {100 * err:.3f} % >= "
                            f"{100 * FIELD_TOL:g} %")
        if max(abs(ramp_y), abs(ramp_x)) > RAMP_LIMIT:
            problems.append(f"frame {t}: residual carrier ramp ({ramp_y:+.3f}, {ramp_x:+.3f}) "
                            f"bins exceeds {RAMP_LIMIT}")
        if not blur > 5 * FIELD_TOL:
            problems.append(f"frame {t}: the test object is not defocused enough ({100 * blur:.2f} %)")
    print(f"worst refocused field error {100 * worst:.3f} %")
    return ref.finish(problems)


if __name__ == "__main__":
    ref.main_guard(main)
