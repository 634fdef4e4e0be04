#include "isa.hpp"

#include "wavestack/focus/metric.hpp"

#include <cstdlib>
#include <cstring>

namespace wavestack::focus::detail {

namespace {

Isa detect() noexcept {
  Isa best = Isa::sse2;
#if defined(__x86_64__) && defined(__GNUC__)
  if (__builtin_cpu_supports("avx512f"))
    best = Isa::avx512;
  else if (__builtin_cpu_supports("avx2"))
    best = Isa::avx2;
#endif
  const char* cap = std::getenv("WAVESTACK_FOCUS_ISA");
  if (cap && std::strcmp(cap, "avx2") == 0 && best > Isa::avx2) best = Isa::avx2;
  if (cap && std::strcmp(cap, "sse2") == 0) best = Isa::sse2;
  return best;
}

} // namespace

Isa isa() noexcept {
  static const Isa level = detect();
  return level;
}

} // namespace wavestack::focus::detail

namespace wavestack::focus {

std::string_view simd_kernels() noexcept {
  switch (detail::isa()) {
  case detail::Isa::avx512: return "avx512";
  case detail::Isa::avx2: return "avx2";
  case detail::Isa::sse2: break;
  }
  return "sse2";
}

} // namespace wavestack::focus
