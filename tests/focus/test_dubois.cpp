// Dubois et al. 2006: the integrated amplitude ∬|U| has its extremum at
// focus, a maximum for a pure phase object and a minimum for a pure
// amplitude object.
#include "focus_test_util.hpp"

#include "wavestack/focus/search.hpp"

#include <catch2/catch.hpp>

#include <algorithm>
#include <cmath>

using namespace wavestack;
using namespace wavestack::focus;
using namespace focus_test;

TEST_CASE("integrated amplitude is maximal at focus for a phase object and minimal for an amplitude object") {
  // P. Dubois, C. Schockaert, N. Callens, C. Yourassowsky, Opt. Express
  // 14(13), 5895 (2006) [confirmed]. Noise-free discs (radius 2 µm) in a
  // 96x96 frame, in focus at d; the curve's coarse extremum must be at the
  // coarse plane nearest d (±1 plane = ±0.5 µm: the sampling of the curve),
  // the other extremum at neither, and the forced-sense refined focus
  // within DOF/10 (Inoué & Spring [common practice]).
  const std::size_t n = 96;
  for (const double d : {-7e-6, 4e-6}) {
    for (const bool phase : {true, false}) {
      Object o{phase ? Object::phase_disc : Object::amplitude_disc};
      o.phase = phase ? 1.0 : 0.0;
      o.absorb = phase ? 0.0 : 0.5;
      o.focus = d;
      const Image<cfloat> f = make_frame(n, n, {o});
      SearchOptions opt;
      opt.metric = Metric::integrated_amplitude;
      opt.extremum = phase ? Extremum::maximum : Extremum::minimum;
      Search s(n, n, grid(), -15e-6, 15e-6, 0.5e-6, opt);
      auto ws = s.make_workspace();
      const FocusResult r = s.run(f, ws);
      const auto mx = std::max_element(r.curve.begin(), r.curve.end()) - r.curve.begin();
      const auto mn = std::min_element(r.curve.begin(), r.curve.end()) - r.curve.begin();
      const auto near = static_cast<std::ptrdiff_t>(s.nearest_plane(d));
      INFO((phase ? "phase" : "amplitude") << " disc at " << d * 1e6 << " um: max at plane " << mx << ", min at "
                                           << mn << ", focus plane " << near << ", refined " << r.distance * 1e6);
      if (phase) {
        CHECK(std::abs(mx - near) <= 1);
        CHECK(std::abs(mn - near) > 1);
      } else {
        CHECK(std::abs(mn - near) <= 1);
        CHECK(std::abs(mx - near) > 1);
      }
      REQUIRE(r.sure);
      CHECK(r.sign == (phase ? +1 : -1));
      CHECK(std::abs(r.distance - d) <= tolerance);
    }
  }
}
