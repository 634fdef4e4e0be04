// Per-object focus: segmentation of the frame and one focus per object.
#include "focus_test_util.hpp"

#include "wavestack/core/error.hpp"
#include "wavestack/focus/objects.hpp"

#include <catch2/catch.hpp>

#include <cmath>
#include <utility>

using namespace wavestack;
using namespace wavestack::focus;
using namespace focus_test;

namespace {
/// A mixed disc sharp at -8 µm (upper left) and a phase disc sharp at +6 µm
/// (lower right), 20 µm apart laterally.
std::pair<Object, Object> two_discs() {
  Object a{Object::mixed_disc};
  a.absorb = 0.3;
  a.phase = 1.0;
  a.focus = -8e-6;
  a.cy = -5e-6;
  a.cx = -10e-6;
  Object b{Object::phase_disc};
  b.phase = 1.0;
  b.focus = 6e-6;
  b.cy = 5e-6;
  b.cx = 10e-6;
  return {a, b};
}
} // namespace

TEST_CASE("two objects at different depths in one frame are each found and focused") {
  // A mixed disc sharp at -8 µm and a phase disc sharp at +6 µm, 20 µm apart
  // laterally in a 160x160 frame (pupil-limited noise σ = 0.02). Both must
  // be segmented (centroid within 2 pixels of the disc centre: the segment is
  // the smoothed max-projection of |∇U|², symmetric about the disc) and
  // focused within DOF/10 (Inoué & Spring [common practice]).
  const std::size_t n = 160;
  const auto [a, b] = two_discs();
  const Image<cfloat> f = make_frame(n, n, {a, b}, 0.02, 21);
  ObjectFocuser of(n, n, grid(), -20e-6, 20e-6, 0.5e-6);
  auto ws = of.make_workspace();
  ObjectTable t;
  of.run(f, t, ws);
  REQUIRE(t.objects.size() == 2);
  CHECK(t.curves.size() == 2 * of.planes());
  for (const Object& o : {a, b}) {
    const double py = frame_pixel(o.cy, n), px = frame_pixel(o.cx, n);
    const ObjectFocus* hit = nullptr;
    for (const auto& row : t.objects)
      if (std::hypot(row.centroid_y - py, row.centroid_x - px) < 2.0) hit = &row;
    INFO("object at pixel (" << py << ", " << px << "), focus " << o.focus * 1e6 << " um");
    REQUIRE(hit);
    INFO("found id " << hit->id << " distance " << hit->distance * 1e6 << " (" << to_string(hit->reason) << "), area "
                     << hit->area);
    REQUIRE(hit->sure);
    CHECK(std::abs(hit->distance - o.focus) <= tolerance);
    CHECK(hit->centroid_x_m == Approx(hit->centroid_x * pitch));
    CHECK(hit->centroid_y_m == Approx(hit->centroid_y * pitch));
    // A disc of radius 2 µm = 8 px covers 201 px; the segment includes the
    // map's blur, so it is larger but of the same order.
    CHECK(hit->area > 100);
    CHECK(hit->area < 2000);
    CHECK(hit->box.height > 0);
  }
  // Steady state: a second run reuses the table's buffers.
  const auto* rows = t.objects.data();
  of.run(f, t, ws);
  CHECK(t.objects.data() == rows);
  CHECK(t.objects.size() == 2);
}

TEST_CASE("the frame's own focus is scored over frame_roi only") {
  // The two discs of the test above, sharp at -8 µm (left) and +6 µm
  // (right); frame_roi covers the left half, so the frame's focus is the
  // left disc's, within DOF/10 [common practice], while both objects are
  // still found. A region outside the frame is a configuration error.
  const std::size_t n = 160;
  const auto [a, b] = two_discs();
  ObjectOptions oo;
  oo.search.band = band;
  oo.frame_roi = Roi{10, 4, 140, 74}; // columns 4..78: the left disc (pixel 40)
  ObjectFocuser of(n, n, grid(), -20e-6, 20e-6, 0.5e-6, oo);
  auto ws = of.make_workspace();
  ObjectTable t;
  of.run(make_frame(n, n, {a, b}, 0.02, 22), t, ws);
  INFO("frame focus " << t.frame.distance * 1e6 << " um (" << to_string(t.frame.reason) << ")");
  REQUIRE(t.frame.sure);
  CHECK(std::abs(t.frame.distance - a.focus) <= tolerance);
  CHECK(t.objects.size() == 2);
  ObjectOptions outside;
  outside.frame_roi = Roi{100, 100, 80, 20};
  CHECK_THROWS_AS(ObjectFocuser(n, n, grid(), -20e-6, 20e-6, 0.5e-6, outside), Error);
}

TEST_CASE("a frame without objects gives an unsure frame focus and no confident object") {
  const std::size_t n = 128;
  ObjectOptions quiet;
  quiet.search.band = band; // noise split in 3 px blocks, as the pipeline sets it
  ObjectFocuser of(n, n, grid(), -20e-6, 20e-6, 0.5e-6, quiet);
  auto ws = of.make_workspace();
  ObjectTable t;
  for (unsigned seed = 1; seed <= 3; ++seed) {
    of.run(make_frame(n, n, {}, 0.02, seed), t, ws);
    CHECK_FALSE(t.frame.sure);
    CHECK(std::isnan(t.frame.distance));
    for (const auto& row : t.objects) {
      CHECK_FALSE(row.sure);
      CHECK(std::isnan(row.distance));
    }
  }
  SearchOptions spectral;
  spectral.metric = Metric::spectral_energy;
  ObjectOptions oo;
  oo.search = spectral;
  CHECK_THROWS_AS(ObjectFocuser(n, n, grid(), -5e-6, 5e-6, 0.5e-6, oo), Error);
}
