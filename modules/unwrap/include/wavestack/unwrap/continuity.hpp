#pragma once
// Time-lapse continuity of unwrapped phase. Each frame is unwrapped on its
// own, so its constant (piston) is arbitrary up to 2π·k: the reliability
// unwrapper anchors each group at its first valid pixel, least squares at
// zero mean, and a small change in the scene can move that anchor across a
// fringe, making a series jump by 2π between frames. These helpers measure
// the piston of a background region (or the whole frame) and shift the frame
// by the whole number of cycles k that brings it within π of a reference:
//   piston = mean of the phase over the background pixels (double),
//   k      = round((reference − piston) / 2π),
//   phase ← phase + 2π·k.
// A shift by whole cycles keeps the result congruent to the measurement.
// The reference is, e.g., the first frame's piston (then every frame can be
// aligned independently, in parallel) or the previous frame's aligned piston
// (then only the choice of k must run in frame order: measure the pistons
// in parallel, decide k serially with cycles_to_reference(), apply
// shift_cycles() anywhere). The mean is used, not the median, so that no
// scratch is needed; a background with unwrapping errors biases it by their
// share times 2π, and only a bias above π changes k.
#include "wavestack/core/image.hpp"

#include <cstdint>

namespace wavestack::unwrap {

/// Mean phase (rad) over the finite pixels where `background` is non-zero;
/// with an empty `background` view, over every finite pixel. NaN when no
/// pixel qualifies. Throws Error(internal) when a non-empty `background`
/// has another shape. Sum in double; one pass.
double background_piston(ImageView<const float> phase, ImageView<const std::uint8_t> background = {});

/// k = round((reference − piston)/2π): the cycles to add so that the
/// piston lies within π of `reference` (ties round away from zero). 0 when
/// either value is not finite.
long cycles_to_reference(double piston, double reference) noexcept;

/// phase ← phase + 2π·cycles on every pixel (no-op for 0).
void shift_cycles(ImageView<float> phase, long cycles) noexcept;

struct ContinuityShift {
  long cycles = 0;          ///< k applied
  double piston_before = 0; ///< background piston before the shift (NaN if none)
  double piston_after = 0;  ///< piston_before + 2πk
};

/// Measure the background piston of `phase`, shift the frame by the cycles
/// that bring it within π of `reference`, and report what was done. With
/// no background pixel the frame is left as it is (cycles = 0).
ContinuityShift keep_continuity(ImageView<float> phase, double reference,
                                ImageView<const std::uint8_t> background = {});

} // namespace wavestack::unwrap
