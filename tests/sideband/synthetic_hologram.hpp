#pragma once
// Synthetic off-axis holograms for the sideband tests, computed in double
// precision and stored as float32 frames:
//   I = |O + R|² = |R|² + |O|² + O·R* + O*·R,  R = exp(−i2π(ky·m/h + kx·n/w)),
// m, n the row and column indices, (ky, kx) the carrier in fractional bins
// (DESIGN.md sign convention: O·R* sits at +fc). The object is a smooth
// phase object O = a·exp(iφ) made of two Gaussian bumps.
#include <vector>
#include "wavestack/core/grid.hpp"
#include "wavestack/core/image.hpp"

#include <cmath>
#include <complex>
#include <cstddef>

namespace sideband_test {

struct Scene {
  std::size_t h = 256, w = 256;
  double dy = 0.2e-6, dx = 0.2e-6; ///< object-space pitch (m)
  double ky = 43.37, kx = 58.59;   ///< carrier, fractional bins (reference wave)
  double amplitude = 0.7;          ///< |O|
  bool symmetric = false;          ///< one bump centred at ((h-1)/2, (w-1)/2) only

  wavestack::Grid grid() const {
    wavestack::Grid g;
    g.dy = dy;
    g.dx = dx;
    g.wavelength = 532e-9;
    g.medium_index = 1.0;
    return g;
  }
  double fy() const { return ky / (static_cast<double>(h) * dy); }
  double fx() const { return kx / (static_cast<double>(w) * dx); }

  /// φ at hologram pixel coordinates (y, x) (fractional rows/columns).
  double phase(double y, double x) const {
    const double side = static_cast<double>(std::min(h, w));
    if (symmetric) {
      const double s = 0.08 * side;
      const double dy0 = y - 0.5 * (static_cast<double>(h) - 1.0), dx0 = x - 0.5 * (static_cast<double>(w) - 1.0);
      return 2.5 * std::exp(-(dy0 * dy0 + dx0 * dx0) / (2 * s * s));
    }
    const double s1 = 0.08 * side, s2 = 0.05 * side;
    const double y1 = y - 0.5 * static_cast<double>(h), x1 = x - 0.5 * static_cast<double>(w);
    const double y2 = y - 0.42 * static_cast<double>(h), x2 = x - 0.60 * static_cast<double>(w);
    return 2.5 * std::exp(-(y1 * y1 + x1 * x1) / (2 * s1 * s1)) -
           1.2 * std::exp(-(y2 * y2 + x2 * x2) / (2 * s2 * s2));
  }

  /// The hologram; with_object = false gives the object-free background
  /// (O = amplitude, flat phase).
  wavestack::Image<float> hologram(bool with_object = true) const {
    wavestack::Image<float> img(h, w);
    for (std::size_t m = 0; m < h; ++m)
      for (std::size_t n = 0; n < w; ++n) {
        const double ph = with_object ? phase(static_cast<double>(m), static_cast<double>(n)) : 0.0;
        const std::complex<double> o = std::polar(amplitude, ph);
        const std::complex<double> r =
            std::polar(1.0, -2.0 * M_PI * (ky * static_cast<double>(m) / static_cast<double>(h) +
                                           kx * static_cast<double>(n) / static_cast<double>(w)));
        img(m, n) = static_cast<float>(std::norm(o + r));
      }
    return img;
  }
};

/// Even, odd and non-square frame sizes with carriers at non-integer bins.
inline std::vector<Scene> size_cases() {
  std::vector<Scene> v;
  Scene s;
  s.h = 256, s.w = 256, s.ky = 43.37, s.kx = 58.59;
  v.push_back(s);
  s.h = 300, s.w = 480, s.ky = 51.37, s.kx = 110.59; // non-square
  v.push_back(s);
  s.h = 257, s.w = 384, s.ky = 44.71, s.kx = 87.23; // odd rows
  v.push_back(s);
  s.h = 240, s.w = 201, s.dx = 0.26e-6, s.ky = -37.66, s.kx = 50.41; // odd columns, rectangular pixels
  v.push_back(s);
  return v;
}

} // namespace sideband_test
