#pragma once
// Small phase helpers shared by the unwrapping algorithms.
//
// Conventions of the whole module:
//  * Phase images are float32 radians, row-major, indexed (y, x) = (row,
//    column); "axis 0" is y (rows), "axis 1" is x (columns), as in numpy.
//  * A validity mask is a uint8 image of the same shape: NON-ZERO = the pixel
//    is used, 0 = the pixel is excluded. This is the opposite of a numpy
//    masked array, whose mask is True where a value is hidden.
//  * Wrapped phase is any value; the algorithms first wrap it to [−π, π).
#include "wavestack/core/image.hpp"

#include <cmath>
#include <cstdint>

namespace wavestack::unwrap {

inline constexpr double pi = 3.14159265358979323846;
inline constexpr double two_pi = 2.0 * pi;
inline constexpr float pi_f = static_cast<float>(pi);
inline constexpr float two_pi_f = static_cast<float>(two_pi);

/// Wrap `v` to [−π, π) (computed in double, so values up to ~1e6 rad wrap
/// correctly). Non-finite values are returned unchanged.
inline float wrap(float v) noexcept {
  if (v >= -pi_f && v < pi_f) return v;
  if (!std::isfinite(v)) return v;
  const double d = static_cast<double>(v);
  double r = d - two_pi * std::floor((d + pi) / two_pi);
  if (r >= pi) r -= two_pi; // float rounding at the upper end
  float f = static_cast<float>(r);
  if (f >= pi_f) f = -pi_f;
  return f;
}

/// Wrapped difference γ(d) for d = a − b of two values that are both in
/// [−π, π) (so d ∈ (−2π, 2π)): d ± 2π into [−π, π]. Branch-free, vectorises.
inline float wrap_difference(float d) noexcept {
  return d - (d > pi_f ? two_pi_f : 0.f) + (d < -pi_f ? two_pi_f : 0.f);
}

/// Congruence step for a smooth (e.g. least-squares) estimate `estimate` of
/// the phase whose wrapped values are `wrapped`: out = wrapped +
/// 2π·round((estimate − wrapped)/2π), i.e. the value congruent to the
/// measurement (equal to it modulo 2π) that is nearest to the estimate
/// (Ghiglia & Pritt, Two-Dimensional Phase Unwrapping, Wiley 1998, ch. 5
/// [from memory]). `out` may alias `estimate`. Pixels where either input is
/// not finite get `estimate`'s value. All three images have the same shape;
/// throws Error(internal) otherwise. Cost: one pass, no allocation.
void make_congruent(ImageView<const float> wrapped, ImageView<const float> estimate, ImageView<float> out);

} // namespace wavestack::unwrap
