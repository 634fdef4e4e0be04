// Per-frame calls allocate nothing once the workspace has seen as many
// objects (DEVELOPERS.md: plan once, run a frame without allocating).
#include "quantify_test_util.hpp"

#include "wavestack/quantify/convert.hpp"
#include "wavestack/quantify/objects.hpp"

#include <catch2/catch.hpp>

#include <cstdlib>
#include <new>
#include <vector>

#include "count_allocations.hpp"
using wavestack_test::new_calls;

using namespace wavestack;
using namespace wavestack::quantify;
using namespace quantify_test;

TEST_CASE("object analysis and conversion allocate nothing per frame") {
  const std::size_t h = 120, w = 140;
  const std::vector<Ellipsoid> cells = {{30, 30, 2.0, 2.0, 1.0, 0.03}, {90, 40, 2.5, 1.5, 1.0, 0.03},
                                        {60, 90, 3.0, 3.0, 1.5, 0.02}};
  Image<float> a = ellipsoid_opd(h, w, 0.1, cells), b = a;
  add_noise(a, 1.0, 1);
  add_noise(b, 1.0, 2);
  Grid g;
  g.dx = g.dy = 0.1e-6;
  for (ThresholdMode mode : {ThresholdMode::robust, ThresholdMode::otsu}) {
    ObjectOptions o;
    o.threshold = mode;
    o.fill_holes = true;
    ObjectAnalyzer an(h, w, g, o);
    auto ws = an.make_workspace();
    ObjectTable t;
    an.analyze(a.view(), t, ws); // first frame sizes the table and accumulators
    const void* ptrs[] = {ws.labels.data(), ws.mask.data(), ws.tmp.data(), ws.near.data(), t.objects.data()};
    ConversionOptions co;
    co.wavelength = 632.8e-9;
    PhaseConverter conv(co);
    Image<float> out(h, w);
    const std::size_t n0 = new_calls;
    for (int frame = 0; frame < 3; ++frame) {
      an.analyze(b.view(), t, ws);
      REQUIRE(t.objects.size() == 3);
      an.analyze(a.view(), t, ws);
      conv.apply(a.view(), out.view());
    }
    CHECK(new_calls == n0);
    const void* after[] = {ws.labels.data(), ws.mask.data(), ws.tmp.data(), ws.near.data(), t.objects.data()};
    for (std::size_t k = 0; k < 5; ++k) CHECK(ptrs[k] == after[k]);
  }
}
