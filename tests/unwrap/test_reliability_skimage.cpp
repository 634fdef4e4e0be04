// Reliability-sorting unwrapping against scikit-image's
// skimage.restoration.unwrap_phase (Debian's scikit-image, run at test time
// through tests/unwrap/reference_unwrap.py). Both implement Herráez et al.,
// Appl. Opt. 41(35) 7437 (2002), and order edges by summed D² (REFERENCES.md
// "Reliability sorting" [confirmed]); they differ in how pixels without a
// full 8-neighbourhood are ordered (scikit-image: random values; here: a
// fixed measure and raster order). Results are compared up to one constant
// 2πk per connected region.
#include "unwrap_test_util.hpp"

#include "wavestack/unwrap/reliability.hpp"
#include "wavestack/unwrap/residues.hpp"

#include <catch2/catch.hpp>

#include <cmath>
#include <vector>

using namespace wavestack;
using namespace wavestack::unwrap;
using unwrap_test::compare_up_to_constant;

namespace {

const std::string script = WAVESTACK_SOURCE_DIR "/tests/unwrap/reference_unwrap.py";

/// scikit-image's result (float64 written by the script) as float32; empty
/// when the script failed.
Image<float> skimage_unwrap(const Image<float>& wr, bool wrap_y, bool wrap_x, const Image<std::uint8_t>* valid,
                            const std::string& tag) {
  const std::size_t h = wr.height(), w = wr.width();
  const std::string in = unwrap_test::temp_path(tag + "_in"), out = unwrap_test::temp_path(tag + "_out"),
                    mk = unwrap_test::temp_path(tag + "_mask");
  unwrap_test::TempFiles cleanup{{in, out, mk}};
  unwrap_test::write_raw<float>(in, wr.view());
  // Built by appending: GCC 12 gives a -Wrestrict false positive on "literal" + std::string&&.
  std::string args = "unwrap ";
  for (const std::string& a : {unwrap_test::quoted(in), unwrap_test::quoted(out), std::to_string(h),
                               std::to_string(w), std::string(wrap_y ? "1" : "0"), std::string(wrap_x ? "1" : "0")}) {
    args += a;
    args += ' ';
  }
  if (valid) {
    unwrap_test::write_raw<std::uint8_t>(mk, valid->view());
    args += unwrap_test::quoted(mk);
  }
  if (unwrap_test::run_python(script, args) != 0) return {};
  const Image<double> d = unwrap_test::read_raw<double>(out, h, w);
  if (d.empty()) return {};
  Image<float> f(h, w);
  for (std::size_t i = 0; i < f.size(); ++i) f.data()[i] = static_cast<float>(d.data()[i]);
  return f;
}

Image<float> ours(const Image<float>& wr, bool wrap_y, bool wrap_x, const Image<std::uint8_t>* valid) {
  ReliabilityOptions opt;
  opt.wrap_y = wrap_y;
  opt.wrap_x = wrap_x;
  ReliabilityUnwrapper u(wr.height(), wr.width(), opt);
  auto ws = u.make_workspace();
  Image<float> out(wr.height(), wr.width());
  if (valid)
    u.apply(wr.view(), valid->view(), out.view(), ws);
  else
    u.apply(wr.view(), out.view(), ws);
  return out;
}

// Output values reach ~100 rad: float32 ulp 7.6e-6 there; the scikit-image
// result is float64 rounded once to float32. Agreement tolerance 5e-5 rad
// (≈ 7 ulp) separates rounding from any 2π difference.
constexpr double agree_tol = 5e-5;

} // namespace

TEST_CASE("reliability unwrapping matches scikit-image on a smooth surface") {
  const std::size_t h = 256, w = 240;
  const Image<float> truth = unwrap_test::synthetic_surface(h, w, 90.0);
  REQUIRE(unwrap_test::max_step(truth) < 2.5); // finely sampled
  const Image<float> wr = unwrap_test::wrapped(truth);
  const Image<float> ref = skimage_unwrap(wr, false, false, nullptr, "smooth");
  REQUIRE(!ref.empty());
  const auto ag = compare_up_to_constant(ours(wr, false, false, nullptr).view(), ref.view(), agree_tol);
  INFO("max difference " << ag.max_error << " after removing 2π·" << ag.cycles);
  CHECK(ag.within == ag.pixels);
  CHECK(std::abs(ag.cycles - std::round(ag.cycles)) < 1e-6);
}

TEST_CASE("reliability unwrapping matches scikit-image on noisy surfaces") {
  // Moderate noise (0.3 rad): few or no residues, results identical. Heavy
  // noise (0.8 rad): many residues, so the result depends on the path, and
  // the two differ only where their edge orders differ (border pixels,
  // ordered randomly by scikit-image) — we require the same result on at
  // least 99% of the pixels [common practice: a path-following unwrapper's
  // errors are confined to regions cut off by residues]. Measured: 100% in
  // both cases (1845 residues in the heavy one): with the same D² ordering
  // the border treatment rarely matters.
  const std::size_t h = 256, w = 256;
  for (auto [sigma, need] : {std::pair<double, double>{0.3, 1.0}, {0.8, 0.99}}) {
    Image<float> truth = unwrap_test::synthetic_surface(h, w, 90.0);
    unwrap_test::add_noise(truth, sigma, 5);
    const Image<float> wr = unwrap_test::wrapped(truth);
    const auto res = count_residues(wr.view());
    const Image<float> ref = skimage_unwrap(wr, false, false, nullptr, "noisy");
    REQUIRE(!ref.empty());
    const auto ag = compare_up_to_constant(ours(wr, false, false, nullptr).view(), ref.view(), agree_tol);
    INFO("sigma " << sigma << ": " << res.total() << " residues, agreement " << 100 * ag.fraction() << "%");
    CHECK(ag.fraction() >= need);
    if (sigma > 0.5) CHECK(res.total() > 100); // the heavy case really has residues
  }
}

TEST_CASE("reliability unwrapping matches scikit-image on masked regions") {
  // scikit-image masked arrays [confirmed]: hidden pixels neither change nor
  // guide. An annulus (one region, holes inside) and two separate discs
  // (each region has its own constant: compared region by region).
  const std::size_t h = 200, w = 220;
  Image<float> truth = unwrap_test::synthetic_surface(h, w, 80.0);
  unwrap_test::add_noise(truth, 0.2, 9);
  const Image<float> wr = unwrap_test::wrapped(truth);
  for (int layout = 0; layout < 2; ++layout) {
    Image<std::uint8_t> valid(h, w, 0);
    std::vector<int> region(h * w, -1);
    for (std::size_t y = 0; y < h; ++y)
      for (std::size_t x = 0; x < w; ++x) {
        const double r = std::hypot(double(y) - 100, double(x) - 110);
        if (layout == 0) {
          if (r < 95 && r > 20) region[y * w + x] = 0;
        } else {
          if (std::hypot(double(y) - 70, double(x) - 60) < 50) region[y * w + x] = 0;
          if (std::hypot(double(y) - 130, double(x) - 160) < 45) region[y * w + x] = 1;
        }
        valid(y, x) = region[y * w + x] >= 0;
      }
    const Image<float> ref = skimage_unwrap(wr, false, false, &valid, "masked");
    REQUIRE(!ref.empty());
    const Image<float> mine = ours(wr, false, false, &valid);
    for (int reg = 0; reg <= layout; ++reg) {
      std::vector<std::uint8_t> use(h * w);
      for (std::size_t i = 0; i < use.size(); ++i) use[i] = region[i] == reg;
      const auto ag = compare_up_to_constant(mine.view(), ref.view(), agree_tol, &use);
      INFO("layout " << layout << " region " << reg << ": " << ag.pixels << " pixels, max difference "
                     << ag.max_error);
      CHECK(ag.pixels > 5000);
      CHECK(ag.within == ag.pixels);
    }
  }
}

TEST_CASE("reliability unwrapping matches scikit-image with wrap-around") {
  // wrap_around per axis [confirmed, scikit-image documentation]. A surface
  // periodic along x (axis 1) with noise; and both axes on a doubly periodic one.
  const std::size_t h = 128, w = 160;
  for (int both = 0; both < 2; ++both) {
    Image<float> truth(h, w);
    for (std::size_t y = 0; y < h; ++y)
      for (std::size_t x = 0; x < w; ++x) {
        const double ax = 2 * pi * double(x) / double(w), ay = 2 * pi * double(y) / double(h);
        truth(y, x) = static_cast<float>(both ? 14.0 * std::sin(ax) * std::cos(ay) + 9.0 * std::cos(2 * ay)
                                              : 16.0 * std::sin(ax) + 0.2 * double(y) + 4.0 * std::cos(ax) * y / h);
      }
    unwrap_test::add_noise(truth, 0.2, 21);
    const Image<float> wr = unwrap_test::wrapped(truth);
    const bool wy = both != 0, wx = true;
    const Image<float> ref = skimage_unwrap(wr, wy, wx, nullptr, "wrap");
    REQUIRE(!ref.empty());
    const Image<float> mine = ours(wr, wy, wx, nullptr);
    const auto ag = compare_up_to_constant(mine.view(), ref.view(), agree_tol);
    const auto tr = compare_up_to_constant(mine.view(), truth.view(), agree_tol);
    INFO("wrap y " << wy << ": agreement " << 100 * ag.fraction() << "%, vs truth " << 100 * tr.fraction() << "%");
    CHECK(ag.within == ag.pixels);
    CHECK(tr.within == tr.pixels); // and both are the true surface
  }
}
