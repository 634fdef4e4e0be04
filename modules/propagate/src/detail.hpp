#pragma once
// Internal helpers shared by the propagators of this module (not installed).
#include "wavestack/core/error.hpp"
#include "wavestack/core/grid.hpp"
#include "wavestack/core/image.hpp"
#include "wavestack/core/units.hpp"
#include "wavestack/fft/fft.hpp"
#include "wavestack/propagate/workspace.hpp"

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <cstring>
#include <string>

namespace wavestack::propagate::detail {

inline bool positive_finite(double v) { return std::isfinite(v) && v > 0.0; }

/// good_size(ceil(pad_factor * n)), never below n. The small tolerance keeps
/// e.g. 1.1 * 100 = 110.00000000000001 at 110.
inline std::size_t padded_size(std::size_t n, double pad_factor) {
  const double target = std::ceil(pad_factor * static_cast<double>(n) - 1e-9);
  return fft::good_size(std::max(n, static_cast<std::size_t>(target)));
}

/// Matsushima & Shimobaba (2009): u_limit = 1/(λ sqrt((2 Δu z)^2 + 1)), Δu the
/// frequency step of the padded grid, λ the wavelength in the medium.
inline double asm_band_limit(double medium_wavelength, double df, double z) {
  const double t = 2.0 * df * z;
  return 1.0 / (medium_wavelength * std::sqrt(t * t + 1.0));
}

/// The same Nyquist argument for the paraxial transfer function
/// exp(-iπλz f^2): its phase has local frequency λ|z| f along f, which must
/// stay <= 1/(2 Δf): u_limit = 1/(2 Δf λ |z|) (+inf at z = 0).
inline double fresnel_band_limit(double medium_wavelength, double df, double z) {
  if (z == 0.0) return HUGE_VAL;
  return 1.0 / (2.0 * df * medium_wavelength * std::fabs(z));
}

/// spec[i] *= t[i] on interleaved (re, im) floats; written out so that the
/// compiler vectorises it (std::complex operator* calls __mulsc3 for the
/// C99 Annex G inf/nan rules and does not vectorise).
inline void multiply(float* __restrict s, const float* __restrict t, std::size_t n) {
  for (std::size_t i = 0; i < n; ++i) {
    const float a = s[2 * i], b = s[2 * i + 1], c = t[2 * i], d = t[2 * i + 1];
    s[2 * i] = a * c - b * d;
    s[2 * i + 1] = a * d + b * c;
  }
}

/// out[i] = in[i] * t[i].
inline void multiply(const float* __restrict in, const float* __restrict t, float* __restrict out, std::size_t n) {
  for (std::size_t i = 0; i < n; ++i) {
    const float a = in[2 * i], b = in[2 * i + 1], c = t[2 * i], d = t[2 * i + 1];
    out[2 * i] = a * c - b * d;
    out[2 * i + 1] = a * d + b * c;
  }
}

/// out[i] = in[i] * t[n-1-i]: the mirrored half of a symmetric row.
inline void multiply_reversed(const float* __restrict in, const float* __restrict t, float* __restrict out,
                              std::size_t n) {
  for (std::size_t i = 0; i < n; ++i) {
    const std::size_t j = n - 1 - i;
    const float a = in[2 * i], b = in[2 * i + 1], c = t[2 * j], d = t[2 * j + 1];
    out[2 * i] = a * c - b * d;
    out[2 * i + 1] = a * d + b * c;
  }
}

inline std::string shape(std::size_t h, std::size_t w) { return std::to_string(h) + "x" + std::to_string(w); }

inline std::string number(double v, int digits = 6) {
  char buf[48];
  std::snprintf(buf, sizeof buf, "%.*g", digits, v);
  return buf;
}

/// A length with 4 significant digits and the most readable unit.
inline std::string length(double metres) { return format_length(metres, 4); }

/// A spatial frequency in cycles/um, 4 significant digits.
inline std::string frequency(double per_metre) { return number(per_metre * 1e-6, 4) + " cycles/um"; }

/// Validates what every propagator needs; `who` starts the message.
inline void check_setup(const char* who, std::size_t h, std::size_t w, const Grid& grid, double distance) {
  const std::string w0 = who;
  if (h == 0 || w == 0) fail_config(w0 + ": the field is empty (" + shape(h, w) + ")");
  if (!positive_finite(grid.dy) || !positive_finite(grid.dx))
    fail_config(w0 + ": the pixel pitch must be positive (got dy = " + format_length(grid.dy) + ", dx = " +
                format_length(grid.dx) + ")");
  if (!positive_finite(grid.wavelength))
    fail_config(w0 + ": the wavelength must be positive (got " + format_length(grid.wavelength) + ")");
  if (!positive_finite(grid.medium_index))
    fail_config(w0 + ": the medium index must be positive (got " + number(grid.medium_index) + ")");
  if (!std::isfinite(distance)) fail_config(w0 + ": the distance must be a finite length");
}

/// Copy `in` (h×w) into the top-left corner of ws.padded, re-zeroing the
/// padding first when a previous user wrote a larger corner.
inline void fill_corner(ImageView<const cfloat> in, Workspace& ws) {
  const std::size_t h = in.height(), w = in.width();
  if (ws.filled_h != h || ws.filled_w != w) {
    if (ws.filled_h > h || ws.filled_w > w) ws.padded.fill(cfloat(0.0f, 0.0f));
    ws.filled_h = h;
    ws.filled_w = w;
  }
  for (std::size_t y = 0; y < h; ++y) std::memcpy(static_cast<void*>(ws.padded.row(y)), in.row(y), w * sizeof(cfloat));
}

/// Phase in double reduced to (-π, π] before it is rounded anywhere.
inline double wrap(double phase) { return std::remainder(phase, 2.0 * M_PI); }

} // namespace wavestack::propagate::detail

namespace wavestack::propagate::detail {

/// s[i] *= t[n-1-i] in place (mirrored half of a symmetric row).
inline void multiply_reversed(float* __restrict s, const float* __restrict t, std::size_t n) {
  for (std::size_t i = 0; i < n; ++i) {
    const std::size_t j = n - 1 - i;
    const float a = s[2 * i], b = s[2 * i + 1], c = t[2 * j], d = t[2 * j + 1];
    s[2 * i] = a * c - b * d;
    s[2 * i + 1] = a * d + b * c;
  }
}

} // namespace wavestack::propagate::detail

#include "wavestack/propagate/method.hpp"

namespace wavestack::propagate::detail {

/// Paraxial phase error at frequency f (cycles/m) over |z|, in closed form:
/// 2π|z| |sqrt(1/λ² − f²) − 1/λ + λf²/2| = π|z|λ³f⁴/(1 + c)², c = sqrt(1 − λ²f²)
/// (algebra [derived]; no cancellation), ≈ πλ³|z|f⁴/4 for small λf. Beyond
/// 1/λ the wave is evanescent and c is taken as 0.
inline double paraxial_error(double lambda, double f, double z) {
  const double lf2 = lambda * lambda * f * f;
  const double c = std::sqrt(std::max(0.0, 1.0 - lf2));
  return M_PI * std::fabs(z) * lambda * lambda * lambda * f * f * f * f / ((1.0 + c) * (1.0 + c));
}

/// Resolved padding factor for `method` (validates Padding::Mode::factor).
double resolve_padding(Method method, std::size_t h, std::size_t w, const Grid& grid, double distance,
                       const PropagatorOptions& options);

/// log::warn once for a choice out of range (explicit or auto fallback);
/// `what` names the caller ("propagate", "plane stack").
void warn_if_out_of_range(const MethodChoice& choice, std::size_t h, std::size_t w, const Grid& grid,
                          const char* what);

} // namespace wavestack::propagate::detail
