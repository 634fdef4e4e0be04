// The sweep's own propagation (one pass over the shared spectrum per plane,
// the quarter transfer table mirrored on the fly, SIMD with masked tails,
// the field read in place from the inverse FFT's buffer) against the plain
// propagate API, value for value.
#include "focus_test_util.hpp"

#include "wavestack/focus/search.hpp"
#include "wavestack/propagate/angular_spectrum.hpp"

#include <catch2/catch.hpp>

#include <cmath>
#include <cstdio>

using namespace wavestack;
using namespace wavestack::focus;

namespace {

/// The curve a search must give: each plane propagated with
/// AngularSpectrum::forward_spectrum + apply_spectrum (zero padding, no
/// background) and scored by the same evaluator.
std::vector<double> reference_curve(const Image<cfloat>& f, const Grid& g, const Search& s) {
  const SearchOptions& o = s.options();
  const MetricEvaluator ev(o.metric, f.height(), f.width(), o.roi, g);
  auto scratch = ev.make_scratch();
  propagate::AngularSpectrumOptions po;
  po.pad_factor = o.pad_factor;
  po.band_limit = o.band_limit;
  std::vector<double> curve;
  for (const double z : s.distances()) {
    const propagate::AngularSpectrum as(f.height(), f.width(), g, z, po);
    auto ws = as.make_workspace();
    Image<cfloat> spectrum = as.make_spectrum(), out(f.height(), f.width());
    as.forward_spectrum(f, spectrum, ws);
    as.apply_spectrum(spectrum, out, ws);
    Moments a, b;
    ev.accumulate_split(out, cfloat(0.0f, 0.0f), o.split_tile, a, b, scratch);
    a += b;
    curve.push_back(metric_value(ev.metric(), a));
  }
  return curve;
}

} // namespace

TEST_CASE("each plane of a sweep is the angular spectrum propagation of the frame, bit for bit") {
  // Same transfer-function values (TransferFunction is bit-identical to
  // AngularSpectrum::transfer(), transfer_function.hpp [derived]), the same
  // products a·c - b·d, a·d + b·c without FMA, the same FFT plans: the
  // curves must be equal, not just close. Odd and unequal sizes with
  // padding exercise the mirrored rows and columns and the SIMD tails; the
  // 0.1 µm pitch puts the Matsushima–Shimobaba band limit well inside the
  // grid (padded 105x135: |fy| <= 1.0 and |fx| <= 1.2 cycles/µm at 10 µm,
  // against a Nyquist frequency of 5 cycles/µm; angular_spectrum.hpp gives
  // the limit), so the per-row support differs from plane to plane. Both
  // metric kernels are used: the 8-pixel checkerboard from the ROI corner
  // (tamura-gradient, whole frame) and the general masked one (amplitude
  // variance, ROI starting at column 3).
  struct Case {
    const char* name;
    double pitch, pad;
    Metric metric;
    Roi roi;
  };
  const Case cases[] = {{"0.25 um, pad 1.3, tamura-gradient", 0.25e-6, 1.3, Metric::tamura_gradient, {}},
                        {"0.1 um, pad 1.5, amplitude-variance, ROI", 0.1e-6, 1.5, Metric::amplitude_variance,
                         {5, 3, 50, 61}},
                        {"0.25 um, pad 1, tamura-gradient", 0.25e-6, 1.0, Metric::tamura_gradient, {}}};
  for (const Case& c : cases) {
    Grid g = focus_test::grid();
    g.dx = g.dy = c.pitch;
    const std::size_t h = 67, w = 90;
    const Image<cfloat> f = focus_test::make_frame(h, w, {}, 0.05, 11);
    SearchOptions o;
    o.metric = c.metric;
    o.roi = c.roi;
    o.pad_factor = c.pad;
    o.background = Background::zero;
    o.refine_levels = 0;
    const Search s(h, w, g, -10e-6, 10e-6, 2.5e-6, o);
    auto ws = s.make_workspace();
    const FocusResult r = s.run(f, ws);
    const std::vector<double> want = reference_curve(f, g, s);
    INFO(c.name << ", padded " << s.padded_height() << "x" << s.padded_width());
    REQUIRE(r.curve.size() == want.size());
    for (std::size_t i = 0; i < want.size(); ++i) {
      INFO("plane " << i << " at " << s.distances()[i] * 1e6 << " um");
      CHECK(std::isfinite(want[i]));
      CHECK(r.curve[i] == want[i]);
    }
  }
}
