// Focus metric definitions: names, senses, moment formulas and the ROI
// evaluator against an independent double-precision computation.
#include "focus_test_util.hpp"

#include "wavestack/core/error.hpp"
#include "wavestack/focus/metric.hpp"

#include <catch2/catch.hpp>

#include <cmath>
#include <cstdlib>
#include <string_view>
#include <random>
#include <limits>
#include <vector>

using namespace wavestack;
using namespace wavestack::focus;

namespace {

Image<cfloat> random_field(std::size_t h, std::size_t w, unsigned seed) {
  std::mt19937 rng(seed);
  std::normal_distribution<float> g(0.f, 0.3f);
  Image<cfloat> u(h, w);
  for (auto& v : u) v = cfloat(1.0f + g(rng), g(rng));
  return u;
}

/// A random field u plus the background b = 0.25 - 0.5i, and the pixel
/// quantity of the tile tests in double: |v|, or the forward-difference
/// gradients of v = u + b [common practice]. NaN where a forward
/// difference leaves the frame.
struct ShiftedField {
  Image<cfloat> u;
  cfloat bf{0.25f, -0.5f};
  std::complex<double> b{0.25, -0.5};
  std::complex<double> v(std::size_t y, std::size_t x) const { return std::complex<double>(u(y, x)) + b; }
  double quantity(Metric m, std::size_t y, std::size_t x) const {
    const bool grad = m == Metric::tamura_gradient || m == Metric::gradient_energy;
    if (grad && (y + 1 >= u.height() || x + 1 >= u.width())) return std::numeric_limits<double>::quiet_NaN();
    if (m == Metric::tamura_gradient) return std::sqrt(std::norm(v(y, x + 1) - v(y, x)) + std::norm(v(y + 1, x) - v(y, x)));
    if (m == Metric::gradient_energy)
      return std::pow(std::abs(v(y, x + 1)) - std::abs(v(y, x)), 2) + std::pow(std::abs(v(y + 1, x)) - std::abs(v(y, x)), 2);
    return std::abs(v(y, x));
  }
};

void add_pixel(Moments& t, double q) {
  t.n += 1;
  t.s1 += q;
  t.s2 += q * q;
}

/// Independent reference: the metric over the ROI computed pixel by pixel
/// in double from the definitions in metric.hpp.
double reference(Metric m, const Image<cfloat>& u, std::complex<double> b, const Roi& r) {
  const std::size_t h = u.height(), w = u.width();
  auto v = [&](std::size_t y, std::size_t x) { return std::complex<double>(u(y, x)) + b; };
  auto a = [&](std::size_t y, std::size_t x) { return std::abs(v(y, x)); };
  std::vector<double> q;
  for (std::size_t y = r.y; y < r.y + r.height; ++y)
    for (std::size_t x = r.x; x < r.x + r.width; ++x) {
      switch (m) {
      case Metric::integrated_amplitude:
      case Metric::amplitude_variance:
      case Metric::tamura_amplitude: q.push_back(a(y, x)); break;
      case Metric::tamura_gradient:
        if (y + 1 < h && x + 1 < w) q.push_back(std::sqrt(std::norm(v(y, x + 1) - v(y, x)) + std::norm(v(y + 1, x) - v(y, x))));
        break;
      case Metric::gradient_energy:
        if (y + 1 < h && x + 1 < w) q.push_back(std::pow(a(y, x + 1) - a(y, x), 2) + std::pow(a(y + 1, x) - a(y, x), 2));
        break;
      case Metric::laplacian_variance:
        if (y >= 1 && x >= 1 && y + 1 < h && x + 1 < w)
          q.push_back(a(y, x - 1) + a(y, x + 1) + a(y - 1, x) + a(y + 1, x) - 4 * a(y, x));
        break;
      default: break;
      }
    }
  double mean = 0;
  for (double x : q) mean += x;
  mean /= static_cast<double>(q.size());
  double var = 0;
  for (double x : q) var += (x - mean) * (x - mean);
  var /= static_cast<double>(q.size());
  switch (m) {
  case Metric::integrated_amplitude:
  case Metric::gradient_energy: return mean;
  case Metric::amplitude_variance:
  case Metric::laplacian_variance: return var;
  default: return std::sqrt(std::sqrt(var) / mean); // Tamura coefficient sqrt(σ/⟨⟩)
  }
}

} // namespace

TEST_CASE("the SIMD kernels in use are the ones WAVESTACK_FOCUS_ISA asks for") {
  // ctest runs this executable three times: as the CPU allows, and capped
  // to AVX2 and to SSE2 (tests/focus/CMakeLists.txt), so every test here
  // also covers the kernels of CPUs without AVX-512 or AVX2.
  const char* cap = std::getenv("WAVESTACK_FOCUS_ISA");
  const std::string_view k = simd_kernels();
  INFO("kernels " << k << ", cap " << (cap ? cap : "none"));
  CHECK((k == "avx512" || k == "avx2" || k == "sse2"));
  if (cap && std::string_view(cap) == "sse2") CHECK(k == "sse2");
  if (cap && std::string_view(cap) == "avx2") CHECK(k != "avx512");
}

TEST_CASE("metric names parse back and auto resolves to the Tamura coefficient of the gradient") {
  for (Metric m : all_metrics()) {
    const auto p = parse_metric(info(m).name);
    REQUIRE(p);
    CHECK(*p == m);
    CHECK(!info(m).source.empty());
  }
  CHECK(parse_metric("auto") == Metric::auto_select);
  CHECK(!parse_metric("sharpness"));
  CHECK(resolve(Metric::auto_select) == Metric::tamura_gradient);
  // Senses as documented: Tamamitsu et al. 2017 (edge sparsity of the complex
  // field) [confirmed] is a maximum for every object; the amplitude criteria
  // of Dubois et al. 2006 [confirmed] change sense with the object type.
  CHECK(info(Metric::tamura_gradient).sense == Sense::maximum);
  CHECK(info(Metric::integrated_amplitude).sense == Sense::depends);
  CHECK(info(Metric::amplitude_variance).sense == Sense::depends);
  CHECK(!is_moment_metric(Metric::spectral_energy));
  CHECK(is_moment_metric(Metric::auto_select));
}

TEST_CASE("moment metrics match a pixel-by-pixel double computation on whole frames and ROIs") {
  // Definitions: Tamura coefficient sqrt(σ/⟨⟩) (Memmolo et al., Opt. Lett.
  // 36(10), 1945 (2011) [from memory]; gradient modulus version Tamamitsu et
  // al. 2017 [confirmed]); mean, variance, forward differences and the
  // 5-point Laplacian [common practice]. Tolerance 1e-5 relative: float
  // pixels (|u| rounded to 6e-8) summed in double; variances of O(0.1)
  // lose no more than that.
  const std::size_t h = 37, w = 52; // odd and even sizes
  const Image<cfloat> u = random_field(h, w, 11);
  const std::complex<double> b(0.25, -0.5);
  const cfloat bf(0.25f, -0.5f);
  for (const Roi roi : {Roi{}, Roi{3, 5, 20, 17}, Roi{30, 40, 7, 12}}) {
    const Roi r = roi.whole() ? Roi{0, 0, h, w} : roi;
    for (Metric m : all_metrics()) {
      if (!is_moment_metric(m)) continue;
      INFO(info(m).name << " roi " << r.y << "," << r.x << " " << r.height << "x" << r.width);
      MetricEvaluator ev(m, h, w, roi, focus_test::grid());
      auto s = ev.make_scratch();
      const double got = ev(u, bf, s), want = reference(m, u, b, r);
      CHECK(got == Approx(want).epsilon(1e-5));
    }
  }
}

TEST_CASE("the spectral criterion is scale-free and its two frequency halves agree on a compact object") {
  // Log-weighted band energy of |F{A-⟨A⟩}|/(sqrt(n)⟨A⟩) (metric.hpp,
  // [common practice]): multiplying the field by a constant leaves it
  // unchanged [derived: the normalisation divides by ⟨A⟩].
  const std::size_t h = 64, w = 48;
  focus_test::Object o{focus_test::Object::amplitude_disc};
  o.radius = 2e-6;
  const Image<cfloat> u = focus_test::make_frame(h, w, {o});
  Image<cfloat> u3 = u;
  for (auto& v : u3) v *= 3.0f;
  MetricEvaluator ev(Metric::spectral_energy, h, w, Roi{}, focus_test::grid());
  auto s = ev.make_scratch();
  double split = 0;
  const double a = ev(u, cfloat(0, 0), s, &split), b = ev(u3, cfloat(0, 0), s);
  CHECK(a > 0);
  CHECK(b == Approx(a).epsilon(1e-5)); // float rounding of the spectrum
  // An object's spectrum is smooth, so even and odd kx+ky bins carry nearly
  // the same energy: the split is a small fraction of the value.
  CHECK(std::abs(split) < 0.05 * a);
}

TEST_CASE("a region of interest outside the frame is a configuration error") {
  CHECK_THROWS_AS(MetricEvaluator(Metric::tamura_gradient, 32, 32, Roi{30, 0, 4, 4}, focus_test::grid()), Error);
  CHECK_THROWS_AS(MetricEvaluator(Metric::tamura_gradient, 0, 32, Roi{}, focus_test::grid()), Error);
}

TEST_CASE("checkerboard halves match a pixel-by-pixel double computation") {
  // accumulate_split: moments of the pixel quantity over the ROI's blocks
  // with even (a) and odd (b) block-row + block-column, against the same
  // definitions as above evaluated in double pixel by pixel [common
  // practice]. Widths of 70 and more give the SIMD kernels whole groups and
  // a tail; ROIs at column 0 and 16 with tile 8 take the kernels' aligned
  // path, the others the masked one. Tolerance 1e-6 relative: float pixel
  // quantities (rounded to 6e-8) summed in double.
  const std::size_t h = 29, w = 75;
  const ShiftedField f{random_field(h, w, 5)};
  struct Case {
    Roi roi;
    std::size_t tile;
  };
  for (const Case c : {Case{Roi{}, 8}, Case{Roi{2, 16, 25, 58}, 8}, Case{Roi{2, 5, 25, 67}, 8}, Case{Roi{}, 5},
                       Case{Roi{4, 1, 20, 73}, 3}})
    for (const Metric m : {Metric::tamura_gradient, Metric::integrated_amplitude, Metric::amplitude_variance,
                           Metric::gradient_energy}) {
      const Roi r = c.roi.whole() ? Roi{0, 0, h, w} : c.roi;
      INFO(info(m).name << " roi " << r.y << "," << r.x << " " << r.height << "x" << r.width << " tile " << c.tile);
      Moments want[2];
      for (std::size_t y = r.y; y < r.y + r.height; ++y)
        for (std::size_t x = r.x; x < r.x + r.width; ++x)
          if (const double q = f.quantity(m, y, x); !std::isnan(q))
            add_pixel(want[((y - r.y) / c.tile + (x - r.x) / c.tile) % 2], q);
      MetricEvaluator ev(m, h, w, c.roi, focus_test::grid());
      auto s = ev.make_scratch();
      Moments got[2];
      ev.accumulate_split(f.u, f.bf, c.tile, got[0], got[1], s);
      for (int k = 0; k < 2; ++k) {
        CHECK(got[k].n == want[k].n);
        CHECK(got[k].s1 == Approx(want[k].s1).epsilon(1e-6));
        CHECK(got[k].s2 == Approx(want[k].s2).epsilon(1e-6));
      }
    }
}

TEST_CASE("tile moments split into even and odd blocks match a pixel-by-pixel double computation") {
  // accumulate with block > 0 (the object focuser's store): per tile of
  // `tile` pixels, the moments of its pixels in even and in odd blocks of a
  // block×block checkerboard anchored at pixel (0,0), against the
  // definitions of the test above evaluated in double pixel by pixel
  // [common practice]. Rectangles and tile grids not anchored at 0, blocks
  // that do and do not divide the tile. Tolerance 1e-6 relative.
  const std::size_t h = 31, w = 70;
  const ShiftedField f{random_field(h, w, 9)};
  struct Case {
    std::size_t y0, x0, y1, x1, tile, ty0, tx0, block;
  };
  for (const Case c : {Case{0, 0, h, w, 8, 0, 0, 2}, Case{0, 0, h, w, 8, 0, 0, 3}, Case{3, 5, 27, 61, 6, 3, 5, 2},
                       Case{1, 2, 30, 69, 7, 0, 0, 1}})
    for (const Metric m : {Metric::tamura_gradient, Metric::amplitude_variance}) {
      INFO(info(m).name << " rect " << c.y0 << "," << c.x0 << ".." << c.y1 << "," << c.x1 << " tile " << c.tile
                        << " block " << c.block);
      const std::size_t tiles_x = (c.x1 - c.tx0 + c.tile - 1) / c.tile, tiles_y = (c.y1 - c.ty0 + c.tile - 1) / c.tile;
      std::vector<Moments> want(2 * tiles_x * tiles_y), got(want.size());
      for (std::size_t y = c.y0; y < c.y1; ++y)
        for (std::size_t x = c.x0; x < c.x1; ++x)
          if (const double q = f.quantity(m, y, x); !std::isnan(q))
            add_pixel(want[2 * (((y - c.ty0) / c.tile) * tiles_x + (x - c.tx0) / c.tile) + (y / c.block + x / c.block) % 2],
                      q);
      MetricEvaluator ev(m, h, w, Roi{}, focus_test::grid());
      auto s = ev.make_scratch();
      ev.accumulate(f.u, f.bf, c.y0, c.x0, c.y1, c.x1, c.tile, c.ty0, c.tx0, tiles_x, got.data(), ImageView<float>(), s,
                    c.block);
      for (std::size_t k = 0; k < want.size(); ++k) {
        INFO("entry " << k);
        CHECK(got[k].n == want[k].n);
        CHECK(got[k].s1 == Approx(want[k].s1).epsilon(1e-6).margin(1e-12));
        CHECK(got[k].s2 == Approx(want[k].s2).epsilon(1e-6).margin(1e-12));
      }
    }
}
