// Per-frame calls allocate nothing once planned (DEVELOPERS.md: plan once,
// run a frame without allocating).
#include "wavefront_test_util.hpp"

#include "wavestack/wavefront/background.hpp"
#include "wavestack/wavefront/report.hpp"
#include "wavestack/wavefront/zernike_fit.hpp"

#include <catch2/catch.hpp>

#include <cstdlib>
#include <new>
#include <vector>

#include "count_allocations.hpp"
using wavestack_test::new_calls;

using namespace wavestack;
using namespace wavestack::wavefront;
using namespace wavefront_test;

TEST_CASE("fit, report and background compensation allocate nothing per frame") {
  const std::size_t h = 96, w = 112;
  Image<float> phase(h, w), amp(h, w, 1.0f), out(h, w);
  for (std::size_t r = 0; r < h; ++r)
    for (std::size_t c = 0; c < w; ++c) {
      const double d = std::hypot(static_cast<double>(c) - 50, static_cast<double>(r) - 40);
      phase(r, c) = static_cast<float>(0.03 * c - 0.02 * r + (d < 12 ? 1.5 : 0.0));
      if (d < 12) amp(r, c) = 0.7f;
    }
  add_noise(phase, 0.02, 1);
  add_noise(amp, 0.01, 2);

  ZernikeFit fit(h, w, {});
  auto fws = fit.make_workspace();
  std::vector<double> c(15);
  WavefrontOptions wo;
  wo.wavelength = 632.8e-9;
  WavefrontAnalyzer an(h, w, wo);
  auto aws = an.make_workspace();
  auto rep = an.make_report();
  BackgroundCompensator comp(h, w, {});
  auto bws = comp.make_workspace();
  std::vector<double> bc(static_cast<std::size_t>(comp.terms()));

  // First calls: warm-up (nothing should be left to grow, but the first
  // frame may legitimately size things).
  fit.fit(phase.view(), c, fws);
  an.analyze(phase.view(), rep, aws);
  comp.apply(phase.view(), amp.view(), out.view(), bc, bws);
  const void* ptrs[] = {bws.residual.data(), bws.gradient.data(), bws.candidates.data(), bws.background.data(),
                        bws.objects.data(), bws.dilated.data(), bws.sample.data(), rep.coefficients_nm.data()};

  const std::size_t n0 = new_calls;
  for (int frame = 0; frame < 3; ++frame) {
    fit.fit(phase.view(), c, fws);
    an.analyze(phase.view(), rep, aws);
    const auto info = comp.apply(phase.view(), amp.view(), out.view(), bc, bws);
    REQUIRE(!info.fell_back); // a fallback would log (and allocate) a warning
    comp.apply(phase.view(), {}, phase.view(), bc, bws); // no amplitude, in place
  }
  CHECK(new_calls == n0);
  const void* after[] = {bws.residual.data(), bws.gradient.data(), bws.candidates.data(), bws.background.data(),
                         bws.objects.data(), bws.dilated.data(), bws.sample.data(), rep.coefficients_nm.data()};
  for (std::size_t k = 0; k < 8; ++k) CHECK(ptrs[k] == after[k]);
}
