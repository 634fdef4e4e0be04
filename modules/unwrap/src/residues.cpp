#include "wavestack/unwrap/residues.hpp"

#include "wavestack/core/error.hpp"
#include "wavestack/unwrap/wrap.hpp"

#include <cmath>
#include <string>

namespace wavestack::unwrap {

namespace {

inline float wdiff(float a, float b) noexcept {
  const float d = a - b;
  return (d >= -pi_f && d < pi_f) ? d : wrap(d);
}

ResidueCount compute(ImageView<const float> ph, const ImageView<const std::uint8_t>* valid,
                     ImageView<std::int8_t>* map) {
  const std::size_t h = ph.height(), w = ph.width();
  if (valid && (valid->height() != h || valid->width() != w))
    fail_internal("residues: the validity mask must have the shape of the phase map");
  if (map && (h < 2 || w < 2 || map->height() != h - 1 || map->width() != w - 1))
    fail_internal("residues: the map must be (h-1)x(w-1) = " + std::to_string(h ? h - 1 : 0) + "x" +
                  std::to_string(w ? w - 1 : 0));
  ResidueCount c;
  if (h < 2 || w < 2) return c;
  const float inv = static_cast<float>(1.0 / two_pi);
  for (std::size_t y = 0; y + 1 < h; ++y) {
    const float* a = ph.row(y);
    const float* b = ph.row(y + 1);
    const std::uint8_t* va = valid ? valid->row(y) : nullptr;
    const std::uint8_t* vb = valid ? valid->row(y + 1) : nullptr;
    std::int8_t* m = map ? map->row(y) : nullptr;
    for (std::size_t x = 0; x + 1 < w; ++x) {
      std::int8_t q = 0;
      const bool use = (!va || (va[x] && va[x + 1] && vb[x] && vb[x + 1])) && std::isfinite(a[x]) &&
                       std::isfinite(a[x + 1]) && std::isfinite(b[x]) && std::isfinite(b[x + 1]);
      if (use) {
        const float s = wdiff(a[x + 1], a[x]) + wdiff(b[x + 1], a[x + 1]) + wdiff(b[x], b[x + 1]) + wdiff(a[x], b[x]);
        q = static_cast<std::int8_t>(std::lround(s * inv));
        ++c.loops;
        if (q > 0) ++c.positive;
        if (q < 0) ++c.negative;
      }
      if (m) m[x] = q;
    }
  }
  return c;
}

} // namespace

ResidueCount residues(ImageView<const float> wrapped, ImageView<std::int8_t> map) {
  return compute(wrapped, nullptr, &map);
}
ResidueCount residues(ImageView<const float> wrapped, ImageView<const std::uint8_t> valid,
                      ImageView<std::int8_t> map) {
  return compute(wrapped, &valid, &map);
}
ResidueCount count_residues(ImageView<const float> wrapped) { return compute(wrapped, nullptr, nullptr); }
ResidueCount count_residues(ImageView<const float> wrapped, ImageView<const std::uint8_t> valid) {
  return compute(wrapped, &valid, nullptr);
}

} // namespace wavestack::unwrap
