// Focus tracking over a series: a drifting object is followed in the
// narrow window; a jump out of the window falls back to the full range.
#include "focus_test_util.hpp"

#include "wavestack/core/error.hpp"
#include "wavestack/focus/tracker.hpp"

#include <catch2/catch.hpp>

#include <cmath>
#include <memory>

using namespace wavestack;
using namespace wavestack::focus;
using namespace focus_test;

namespace {
constexpr std::size_t n = 128;

Image<cfloat> frame_at(double focus, unsigned seed) {
  Object o{Object::mixed_disc};
  o.absorb = 0.3;
  o.phase = 1.0;
  o.focus = focus;
  return make_frame(n, n, {o}, 0.02, seed);
}
} // namespace

TEST_CASE("a focus drifting over 20 frames is tracked within a tenth of the depth of field") {
  // Known drift: 0.37 µm per frame from -6 µm (ends at +1.03 µm) — off the
  // 0.5 µm grid so the refinement matters. Tolerance DOF/10 = 0.15 µm
  // (Inoué & Spring [common practice]) on every frame. All frames after the
  // first must be windowed (17 planes) without fallback.
  auto search = std::make_shared<const Search>(n, n, grid(), -20e-6, 20e-6, 0.5e-6);
  Tracker t(search);
  auto ws = t.make_workspace();
  for (int k = 0; k < 20; ++k) {
    const double truth = -6e-6 + 0.37e-6 * k;
    const FocusResult& r = t.track(frame_at(truth, 200 + k), ws);
    INFO("frame " << k << ": truth " << truth * 1e6 << " um, found " << r.distance * 1e6 << " ("
                  << to_string(r.reason) << ")");
    REQUIRE(r.sure);
    CHECK(std::abs(r.distance - truth) <= tolerance);
    CHECK_FALSE(t.fell_back());
    CHECK(t.windowed() == (k > 0));
    if (k > 0) CHECK(r.propagations == 17 + 10);
  }
  CHECK(t.fallbacks() == 0);
}

TEST_CASE("a jump out of the window falls back to the full range and finds the new focus") {
  auto search = std::make_shared<const Search>(n, n, grid(), -20e-6, 20e-6, 0.5e-6);
  Tracker t(search); // window ±8 planes = ±4 µm
  auto ws = t.make_workspace();
  const FocusResult& a = t.track(frame_at(-5e-6, 301), ws);
  REQUIRE(a.sure);
  t.track(frame_at(-4.6e-6, 302), ws);
  CHECK(t.windowed());
  // Jump by +14 µm: the window (-8.5..-0.5 µm) sees only the rising flank,
  // so its extremum is at the window edge → fallback.
  const FocusResult& b = t.track(frame_at(9.4e-6, 303), ws);
  CHECK(t.fell_back());
  CHECK(t.fallbacks() == 1);
  REQUIRE(b.sure);
  CHECK(std::abs(b.distance - 9.4e-6) <= tolerance);
  CHECK(b.propagations == 17 + 81 + 10); // window, full sweep, refinement
  // The next frame is windowed around the new focus again.
  const FocusResult& c = t.track(frame_at(9.7e-6, 304), ws);
  CHECK(t.windowed());
  CHECK(std::abs(c.distance - 9.7e-6) <= tolerance);
  // A frame without object: unsure, the lock is lost, no number.
  const FocusResult& d = t.track(make_frame(n, n, {}, 0.02, 305), ws);
  CHECK_FALSE(d.sure);
  CHECK(std::isnan(d.distance));
  CHECK(std::isnan(t.locked_distance()));
  CHECK_THROWS_AS(Tracker(nullptr), Error);
}
