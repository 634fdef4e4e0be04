// Time-lapse continuity: shifting frames by whole cycles so that the
// background piston stays at a reference level.
#include "unwrap_test_util.hpp"

#include "wavestack/core/error.hpp"
#include "wavestack/unwrap/continuity.hpp"
#include "wavestack/unwrap/reliability.hpp"

#include <catch2/catch.hpp>

#include <cmath>
#include <limits>
#include <vector>

using namespace wavestack;
using namespace wavestack::unwrap;

namespace {

/// Frame t of an invented series: a compact bump (1 − r²/R²)², R = 25,
/// zero outside, centred at (40, 50), that grows by `growth` rad per frame
/// on a background tilt, plus a piston drifting by `drift` rad per frame.
Image<float> frame(std::size_t h, std::size_t w, int t, double drift, double growth) {
  Image<float> f(h, w);
  for (std::size_t y = 0; y < h; ++y)
    for (std::size_t x = 0; x < w; ++x) {
      const double r2 = (double(y) - 40) * (double(y) - 40) + (double(x) - 50) * (double(x) - 50);
      const double b = r2 < 625.0 ? (1 - r2 / 625.0) * (1 - r2 / 625.0) : 0.0;
      f(y, x) = static_cast<float>(2.5 + drift * t + 0.05 * double(x) + (8.0 + growth * t) * b);
    }
  return f;
}

} // namespace

TEST_CASE("a series with an artificial 2π jump between frames is made continuous") {
  // Each frame unwrapped on its own is anchored at its first pixel, whose
  // wrapped value jumps from +π to −π when the drifting piston crosses π:
  // the naive series then drops by 2π [derived]. Aligning every frame to the
  // previous aligned frame's background piston (continuity.hpp) removes
  // the jump: consecutive pistons then differ by the true drift, 0.4 rad,
  // to float rounding (tolerance 1e-4 rad, pistons are means of ~1e4 float
  // values of ~10 rad), and the aligned series equals the truth up to the
  // first frame's constant, a whole number of cycles.
  const std::size_t h = 80, w = 100;
  const double drift = 0.4;
  ReliabilityUnwrapper u(h, w);
  auto ws = u.make_workspace();
  std::vector<double> naive, aligned;
  double reference = 0, offset0 = 0;
  std::size_t jumps = 0;
  for (int t = 0; t < 8; ++t) {
    const Image<float> truth = frame(h, w, t, drift, 0.0);
    Image<float> out(h, w);
    u.apply(unwrap_test::wrapped(truth).view(), out.view(), ws);
    naive.push_back(background_piston(out.view()));
    if (t > 0 && std::abs(naive[t] - naive[t - 1]) > pi) ++jumps;
    const auto s = keep_continuity(out.view(), t == 0 ? naive[0] : reference);
    if (t == 0) CHECK(s.cycles == 0);
    reference = s.piston_after;
    aligned.push_back(s.piston_after);
    CHECK(background_piston(out.view()) == Approx(s.piston_after).margin(1e-4));
    const auto ag = unwrap_test::compare_up_to_constant(out.view(), truth.view(), 1e-4);
    if (t == 0) offset0 = ag.offset;
    CHECK(ag.max_error < 1e-4);
    CHECK(ag.offset == Approx(offset0).margin(1e-4)); // same constant in every frame
    CHECK(std::abs(ag.cycles - std::round(ag.cycles)) < 1e-4);
  }
  CHECK(jumps >= 1); // the naive series did jump
  for (std::size_t t = 1; t < aligned.size(); ++t) CHECK(aligned[t] - aligned[t - 1] == Approx(drift).margin(1e-4));
}

TEST_CASE("a background mask keeps the piston when the object changes by more than π") {
  // The bump grows by 15 rad per frame (its volume πR²/3 per rad of height
  // over 8000 pixels: the whole-frame mean rises 1.2 rad per frame), so
  // after three frames aligning on the whole frame would shift by whole
  // cycles that are not there. On the background alone (outside the bump)
  // the piston is steady and no shift is applied [derived].
  const std::size_t h = 80, w = 100;
  Image<std::uint8_t> background(h, w, 0);
  for (std::size_t y = 0; y < h; ++y)
    for (std::size_t x = 0; x < w; ++x) {
      const double r2 = (double(y) - 40) * (double(y) - 40) + (double(x) - 50) * (double(x) - 50);
      background(y, x) = r2 > 27.0 * 27.0;
    }
  Image<float> first = frame(h, w, 0, 0.0, 15.0);
  const double ref_bg = background_piston(first.view(), background.view());
  const double ref_all = background_piston(first.view());
  std::size_t wrong_shifts_whole_frame = 0;
  for (int t = 1; t < 6; ++t) {
    Image<float> f = frame(h, w, t, 0.0, 15.0);
    Image<float> g = f;
    const auto s = keep_continuity(f.view(), ref_bg, background.view());
    CHECK(s.cycles == 0);
    CHECK(s.piston_before == Approx(ref_bg).margin(1e-4));
    wrong_shifts_whole_frame += keep_continuity(g.view(), ref_all).cycles != 0;
  }
  CHECK(wrong_shifts_whole_frame > 0); // why a background mask is needed

  // A frame that came out 2π·3 too high is brought back.
  Image<float> f = frame(h, w, 2, 0.0, 15.0);
  Image<float> g = f;
  shift_cycles(g.view(), 3);
  const auto s = keep_continuity(g.view(), ref_bg, background.view());
  CHECK(s.cycles == -3);
  const auto ag = unwrap_test::compare_up_to_constant(g.view(), f.view(), 1e-4);
  CHECK(std::abs(ag.offset) < 1e-4);
}

TEST_CASE("continuity helpers: rounding, empty backgrounds and shape checks") {
  CHECK(cycles_to_reference(0.0, 0.0) == 0);
  CHECK(cycles_to_reference(0.0, 3.0) == 0);      // within π
  CHECK(cycles_to_reference(0.0, 3.3) == 1);      // nearer after one cycle
  CHECK(cycles_to_reference(20.0, 0.0) == -3);    // 20 − 6π = 1.15
  CHECK(cycles_to_reference(std::numeric_limits<double>::quiet_NaN(), 1.0) == 0);
  Image<float> f(4, 5, 1.f);
  f(0, 0) = std::numeric_limits<float>::quiet_NaN();
  CHECK(background_piston(f.view()) == Approx(1.0)); // non-finite pixels left out
  const Image<std::uint8_t> none(4, 5, 0);
  CHECK(std::isnan(background_piston(f.view(), none.view())));
  const auto s = keep_continuity(f.view(), 100.0, none.view());
  CHECK(s.cycles == 0);
  CHECK(f(1, 1) == 1.f);
  CHECK_THROWS_AS(background_piston(f.view(), Image<std::uint8_t>(4, 4, 1).view()), Error);
}
