#include "wavestack/unwrap/continuity.hpp"

#include "wavestack/core/error.hpp"
#include "wavestack/unwrap/wrap.hpp"

#include <cmath>
#include <limits>

namespace wavestack::unwrap {

double background_piston(ImageView<const float> phase, ImageView<const std::uint8_t> background) {
  const bool masked = !background.empty();
  if (masked && (background.height() != phase.height() || background.width() != phase.width()))
    fail_internal("background_piston: the background mask must have the shape of the phase map");
  double sum = 0;
  std::size_t n = 0;
  for (std::size_t y = 0; y < phase.height(); ++y) {
    const float* p = phase.row(y);
    const std::uint8_t* b = masked ? background.row(y) : nullptr;
    for (std::size_t x = 0; x < phase.width(); ++x)
      if ((!b || b[x]) && std::isfinite(p[x])) {
        sum += p[x];
        ++n;
      }
  }
  return n ? sum / double(n) : std::numeric_limits<double>::quiet_NaN();
}

long cycles_to_reference(double piston, double reference) noexcept {
  if (!std::isfinite(piston) || !std::isfinite(reference)) return 0;
  return std::lround((reference - piston) / two_pi);
}

void shift_cycles(ImageView<float> phase, long cycles) noexcept {
  if (cycles == 0) return;
  const float s = static_cast<float>(two_pi * double(cycles));
  for (std::size_t y = 0; y < phase.height(); ++y) {
    float* p = phase.row(y);
    for (std::size_t x = 0; x < phase.width(); ++x) p[x] += s;
  }
}

ContinuityShift keep_continuity(ImageView<float> phase, double reference, ImageView<const std::uint8_t> background) {
  ContinuityShift r;
  r.piston_before = background_piston(phase, background);
  r.cycles = cycles_to_reference(r.piston_before, reference);
  shift_cycles(phase, r.cycles);
  r.piston_after = r.piston_before + two_pi * double(r.cycles);
  return r;
}

} // namespace wavestack::unwrap
