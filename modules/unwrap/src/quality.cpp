#include "wavestack/unwrap/quality.hpp"

#include "wavestack/core/error.hpp"
#include "wavestack/unwrap/wrap.hpp"

#include <algorithm>
#include <cmath>
#include <string>

namespace wavestack::unwrap {

namespace {
void same_shape(std::size_t h1, std::size_t w1, std::size_t h2, std::size_t w2, const char* what) {
  if (h1 != h2 || w1 != w2) fail_internal(std::string(what) + ": the weight image must have the input's shape");
}
inline float wdiff(float a, float b) noexcept {
  const float d = a - b;
  return (d >= -pi_f && d < pi_f) ? d : wrap(d);
}
} // namespace

void amplitude_weights(ImageView<const float> a, ImageView<float> wt) {
  same_shape(a.height(), a.width(), wt.height(), wt.width(), "amplitude_weights");
  float mx = 0.f;
  for (std::size_t y = 0; y < a.height(); ++y)
    for (std::size_t x = 0; x < a.width(); ++x) {
      const float v = a(y, x);
      if (std::isfinite(v) && v > mx) mx = v;
    }
  const float inv = mx > 0.f ? 1.f / mx : 0.f;
  for (std::size_t y = 0; y < a.height(); ++y)
    for (std::size_t x = 0; x < a.width(); ++x) {
      const float v = a(y, x);
      wt(y, x) = (std::isfinite(v) && v > 0.f) ? std::min(1.f, v * inv) : 0.f;
    }
}

void derivative_variance_weights(ImageView<const float> ph, ImageView<float> wt, int window) {
  same_shape(ph.height(), ph.width(), wt.height(), wt.width(), "derivative_variance_weights");
  if (window < 3 || window % 2 == 0)
    fail_config("derivative_variance_weights: the window must be odd and at least 3, got " + std::to_string(window));
  const std::ptrdiff_t h = static_cast<std::ptrdiff_t>(ph.height()), w = static_cast<std::ptrdiff_t>(ph.width());
  const std::ptrdiff_t r = window / 2;
  auto finite = [&](std::ptrdiff_t y, std::ptrdiff_t x) { return std::isfinite(ph(y, x)); };
  float zmax = 0.f;
  for (std::ptrdiff_t y = 0; y < h; ++y)
    for (std::ptrdiff_t x = 0; x < w; ++x) {
      if (!finite(y, x)) {
        wt(y, x) = -1.f; // marks "weight 0" for the second pass
        continue;
      }
      double sx = 0, sxx = 0, sy = 0, syy = 0;
      std::size_t nx = 0, ny = 0, npix = 0;
      for (std::ptrdiff_t i = std::max<std::ptrdiff_t>(0, y - r); i <= std::min(h - 1, y + r); ++i)
        for (std::ptrdiff_t j = std::max<std::ptrdiff_t>(0, x - r); j <= std::min(w - 1, x + r); ++j) {
          if (!finite(i, j)) continue;
          ++npix;
          if (j + 1 < w && finite(i, j + 1)) {
            const double d = wdiff(ph(i, j + 1), ph(i, j));
            sx += d;
            sxx += d * d;
            ++nx;
          }
          if (i + 1 < h && finite(i + 1, j)) {
            const double d = wdiff(ph(i + 1, j), ph(i, j));
            sy += d;
            syy += d * d;
            ++ny;
          }
        }
      const double vx = nx ? std::max(0.0, sxx - sx * sx / double(nx)) : 0.0;
      const double vy = ny ? std::max(0.0, syy - sy * sy / double(ny)) : 0.0;
      const float z = static_cast<float>((std::sqrt(vx) + std::sqrt(vy)) / double(npix));
      wt(y, x) = z;
      zmax = std::max(zmax, z);
    }
  const float inv = zmax > 0.f ? 1.f / zmax : 0.f;
  for (std::ptrdiff_t y = 0; y < h; ++y)
    for (std::ptrdiff_t x = 0; x < w; ++x) {
      const float z = wt(y, x);
      wt(y, x) = z < 0.f ? 0.f : std::clamp(1.f - z * inv, 0.f, 1.f);
    }
}

} // namespace wavestack::unwrap
