// Reflective step target: background/tilt removal, height, pad statistics.
#include "quantify_test_util.hpp"

#include "wavestack/quantify/convert.hpp"
#include "wavestack/quantify/objects.hpp"
#include "wavestack/wavefront/background.hpp"

#include <catch2/catch.hpp>

#include <cmath>
#include <vector>

using namespace wavestack;
using namespace wavestack::quantify;
using namespace quantify_test;

TEST_CASE("a 50 nm reflective step is recovered within 1 nm after tilt and curvature removal") {
  // Reflection: φ = 4πh/λ0 (REFERENCES.md "Quantitative phase" with the
  // path crossed twice [derived]). A 40x40-pixel pad 50 nm high on a flat
  // substrate, under an instrument tilt and curvature of ~30 rad and white
  // phase noise 0.02 rad (1.0 nm of height). Chain: automatic background
  // compensation (degree-2 polynomial, wavefront module) → height by
  // h = OPD/2 → pad = the object above a fixed 25 nm threshold → mean
  // height relative to the substrate median. Expected error: noise over
  // 1600 pad pixels (0.03 nm) plus the background-fit error (~0.02 nm);
  // the tolerance is the 1 nm the task asks for (measured 50.02 nm for
  // 128x128 and 50.05 nm for 127x141).
  const double lambda = 632.8e-9, step_nm = 50.0;
  for (auto shape : {std::pair<std::size_t, std::size_t>{128, 128}, {127, 141}}) {
    const std::size_t h = shape.first, w = shape.second;
    INFO(h << "x" << w);
    Image<float> phase(h, w);
    for (std::size_t r = 0; r < h; ++r)
      for (std::size_t c = 0; c < w; ++c) {
        const bool pad = r >= 44 && r < 84 && c >= 50 && c < 90;
        const double dx = static_cast<double>(c) - 20, dy = static_cast<double>(r) - 90;
        const double aberr = 0.5 + 0.08 * c + 0.05 * r + 1e-3 * (dx * dx + dy * dy);
        phase(r, c) = static_cast<float>(aberr + (pad ? 4 * M_PI * step_nm * 1e-9 / lambda : 0.0));
      }
    add_noise(phase, 0.02, 77);

    wavefront::BackgroundCompensator comp(h, w, {});
    auto cws = comp.make_workspace();
    std::vector<double> coef(static_cast<std::size_t>(comp.terms()));
    const auto fit = comp.apply(phase.view(), {}, phase.view(), coef, cws);
    CHECK(!fit.fell_back);

    ConversionOptions co;
    co.quantity = Quantity::height_reflection;
    co.wavelength = lambda;
    Image<float> height(h, w);
    PhaseConverter(co).apply(phase.view(), height.view());

    Grid g;
    g.dx = g.dy = 0.2e-6;
    ObjectOptions oo;
    oo.threshold = ThresholdMode::fixed;
    oo.threshold_nm = step_nm / 2;
    ObjectAnalyzer an(h, w, g, oo);
    auto ows = an.make_workspace();
    ObjectTable t;
    an.analyze(height.view(), t, ows);
    REQUIRE(t.objects.size() == 1);
    const ObjectRecord& pad = t.objects[0];
    INFO("pad height " << pad.mean_opd_nm << " nm, substrate level " << t.background_nm << " nm");
    CHECK(pad.area_pixels == 1600); // 25σ from the threshold: no pixel misclassified
    CHECK(std::abs(pad.mean_opd_nm - step_nm) < 1.0);
    CHECK(std::abs(t.background_nm) < 1.0);
    CHECK(pad.col0 == 50);
    CHECK(pad.row1 == 84);
  }
}
