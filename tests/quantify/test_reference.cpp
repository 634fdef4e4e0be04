// Segmentation against scipy.ndimage and scikit-image, through the
// checked-in script tests/quantify/reference_objects.py (/usr/bin/python3).
#include "quantify_test_util.hpp"

#include "wavestack/quantify/objects.hpp"

#include <catch2/catch.hpp>

#include <cmath>
#include <random>
#include <vector>

using namespace wavestack;
using namespace wavestack::quantify;
using namespace quantify_test;

namespace {

/// Irregular blobs with holes, necks and diagonal contacts: box-blurred
/// uniform noise, thresholded (invented test pattern).
Image<std::uint8_t> blobs(std::size_t h, std::size_t w, unsigned seed, double level) {
  std::mt19937 rng(seed);
  std::uniform_real_distribution<double> u(0, 1);
  Image<float> noise(h, w);
  for (float& v : noise) v = static_cast<float>(u(rng));
  Image<std::uint8_t> m(h, w);
  const long k = 2;
  for (long r = 0; r < static_cast<long>(h); ++r)
    for (long c = 0; c < static_cast<long>(w); ++c) {
      double s = 0;
      int cnt = 0;
      for (long dr = -k; dr <= k; ++dr)
        for (long dc = -k; dc <= k; ++dc) {
          const long rr = r + dr, cc = c + dc;
          if (rr < 0 || cc < 0 || rr >= static_cast<long>(h) || cc >= static_cast<long>(w)) continue;
          s += noise(static_cast<std::size_t>(rr), static_cast<std::size_t>(cc));
          ++cnt;
        }
      m(static_cast<std::size_t>(r), static_cast<std::size_t>(c)) = s / cnt > level;
    }
  return m;
}

Image<float> as_opd(const Image<std::uint8_t>& m) {
  Image<float> o(m.height(), m.width());
  for (std::size_t i = 0; i < m.size(); ++i) o.data()[i] = m.data()[i] ? 100.0f : 0.0f;
  return o;
}

ObjectOptions exact_mask_options(int conn, bool fill) {
  ObjectOptions o;
  o.threshold = ThresholdMode::fixed;
  o.threshold_nm = 50;
  o.subtract_background = false;
  o.min_area_pixels = 0;
  o.connectivity = conn;
  o.fill_holes = fill;
  return o;
}

Grid unit_grid() {
  Grid g;
  g.dx = g.dy = 1e-6;
  return g;
}

} // namespace

TEST_CASE("connected components equal scipy.ndimage.label") {
  // scipy.ndimage.label numbers components in the raster order of their
  // first pixel, with the cross (4) or 3x3 (8) structure [common practice:
  // reference implementation]. Label images must agree exactly. Sizes:
  // odd/prime (97x131) and even (64x80); two densities.
  for (auto shape : {std::pair<std::size_t, std::size_t>{97, 131}, {64, 80}})
    for (double level : {0.5, 0.53})
      for (int conn : {4, 8}) {
        INFO(shape.first << "x" << shape.second << ", level " << level << ", connectivity " << conn);
        const auto m = blobs(shape.first, shape.second, 5u + static_cast<unsigned>(shape.first), level);
        Image<std::int32_t> ref(m.height(), m.width());
        REQUIRE(run_reference("label", m, ref, std::to_string(conn)));
        ObjectAnalyzer an(m.height(), m.width(), unit_grid(), exact_mask_options(conn, false));
        auto ws = an.make_workspace();
        ObjectTable t;
        an.analyze(as_opd(m).view(), t, ws);
        std::int32_t maxref = 0;
        std::size_t mismatches = 0;
        for (std::size_t i = 0; i < ref.size(); ++i) {
          maxref = std::max(maxref, ref.data()[i]);
          mismatches += ref.data()[i] != ws.labels.data()[i];
        }
        CHECK(mismatches == 0);
        CHECK(t.objects.size() == static_cast<std::size_t>(maxref));
        CHECK(maxref > 10); // the pattern really has many components
        // Areas agree with scipy's per-label pixel counts.
        std::vector<std::size_t> count(static_cast<std::size_t>(maxref) + 1, 0);
        for (std::size_t i = 0; i < ref.size(); ++i) ++count[static_cast<std::size_t>(ref.data()[i])];
        for (const ObjectRecord& r : t.objects) REQUIRE(r.area_pixels == count[static_cast<std::size_t>(r.id)]);
      }
}

TEST_CASE("hole filling equals scipy.ndimage.binary_fill_holes") {
  // The background connectivity is the complement of the object one
  // (objects.hpp): 8-connected objects fill with the cross structure,
  // 4-connected ones with the 3x3 structure.
  const auto m = blobs(97, 131, 17, 0.48);
  for (int conn : {4, 8}) {
    INFO("object connectivity " << conn);
    Image<std::uint8_t> ref(m.height(), m.width());
    REQUIRE(run_reference("fill", m, ref, std::to_string(conn == 8 ? 4 : 8)));
    ObjectAnalyzer an(m.height(), m.width(), unit_grid(), exact_mask_options(conn, true));
    auto ws = an.make_workspace();
    ObjectTable t;
    an.analyze(as_opd(m).view(), t, ws);
    std::size_t mismatches = 0, filled = 0;
    for (std::size_t i = 0; i < ref.size(); ++i) {
      mismatches += (ref.data()[i] != 0) != (ws.labels.data()[i] != 0);
      filled += ref.data()[i] != 0 && m.data()[i] == 0;
    }
    CHECK(mismatches == 0);
    CHECK(filled > 0); // the pattern has holes
  }
}

TEST_CASE("Otsu threshold equals skimage.filters.threshold_otsu") {
  // Otsu, IEEE Trans. SMC 9(1), 62 (1979) [from memory], as implemented by
  // scikit-image (256 bins over [min, max], bin centres). Our binning in
  // double may put a value on an edge into the neighbouring bin where numpy
  // does not; that can move the maximum by one bin at most: tolerance one
  // bin width.
  const std::size_t h = 90, w = 110;
  Image<float> img(h, w);
  std::mt19937 rng(8);
  std::normal_distribution<double> bg(0.0, 3.0), fg(40.0, 6.0);
  for (std::size_t r = 0; r < h; ++r)
    for (std::size_t c = 0; c < w; ++c) {
      const bool obj = std::hypot(static_cast<double>(c) - 60, static_cast<double>(r) - 40) < 25;
      img(r, c) = static_cast<float>(obj ? fg(rng) : bg(rng));
    }
  Image<double> ref(1, 1);
  REQUIRE(run_reference("otsu", img, ref));
  std::vector<std::uint64_t> hist;
  const double t = otsu_threshold(img.view(), hist);
  float lo = img.data()[0], hi = lo;
  for (float v : img) {
    lo = std::min(lo, v);
    hi = std::max(hi, v);
  }
  const double bin = (static_cast<double>(hi) - lo) / 256;
  INFO("ours " << t << ", skimage " << ref(0, 0) << ", bin " << bin);
  CHECK(std::abs(t - ref(0, 0)) <= bin * 1.001);
  // Through the analyzer: the applied level is the same threshold.
  ObjectOptions o;
  o.threshold = ThresholdMode::otsu;
  ObjectAnalyzer an(h, w, unit_grid(), o);
  auto ws = an.make_workspace();
  ObjectTable table;
  an.analyze(img.view(), table, ws);
  CHECK(table.threshold_nm == t);
  REQUIRE(table.objects.size() >= 1);
  // The disk of radius 25 dominates: its area within 3 % (misclassified
  // tail pixels of the two populations).
  std::size_t biggest = 0;
  for (const auto& r : table.objects) biggest = std::max(biggest, r.area_pixels);
  CHECK(static_cast<double>(biggest) == Approx(M_PI * 25 * 25).epsilon(0.03));
}
