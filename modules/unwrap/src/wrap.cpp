#include "wavestack/unwrap/wrap.hpp"

#include "wavestack/core/error.hpp"

#include <cmath>

namespace wavestack::unwrap {

void make_congruent(ImageView<const float> wrapped, ImageView<const float> estimate, ImageView<float> out) {
  if (wrapped.height() != estimate.height() || wrapped.width() != estimate.width() ||
      out.height() != estimate.height() || out.width() != estimate.width())
    fail_internal("make_congruent: the three images must have the same shape");
  for (std::size_t y = 0; y < out.height(); ++y) {
    const float* a = wrapped.row(y);
    const float* e = estimate.row(y);
    float* o = out.row(y);
    for (std::size_t x = 0; x < out.width(); ++x) {
      const double wv = a[x], ev = e[x];
      if (!std::isfinite(wv) || !std::isfinite(ev)) {
        o[x] = e[x];
        continue;
      }
      o[x] = static_cast<float>(wv + two_pi * std::nearbyint((ev - wv) / two_pi));
    }
  }
}

} // namespace wavestack::unwrap
