// Reliability-sorting unwrapping (Herráez, Burton, Lalor & Gdeisat, Appl.
// Opt. 41(35) 7437 (2002)): exact recovery of analytic surfaces, the
// scikit-image documented example, masks, wrap-around, determinism and the
// workspace contract. Comparisons with scikit-image itself are in
// test_reliability_skimage.cpp.
#include "unwrap_test_util.hpp"

#include "wavestack/core/error.hpp"
#include "wavestack/unwrap/reliability.hpp"

#include <catch2/catch.hpp>

#include <cmath>
#include <cstring>
#include <limits>
#include <thread>

using namespace wavestack;
using namespace wavestack::unwrap;
using unwrap_test::compare_up_to_constant;

namespace {

/// Analytic surface evaluated in double, rounded once to float.
template <class F> Image<float> analytic(std::size_t h, std::size_t w, F f) {
  Image<float> img(h, w);
  for (std::size_t y = 0; y < h; ++y)
    for (std::size_t x = 0; x < w; ++x) img(y, x) = static_cast<float>(f(double(y), double(x)));
  return img;
}

double peak_to_valley(const Image<float>& img) {
  float lo = img.data()[0], hi = lo;
  for (float v : img) lo = std::min(lo, v), hi = std::max(hi, v);
  return double(hi) - double(lo);
}

Image<float> unwrap_reliability(const Image<float>& wr, ReliabilityOptions opt = {},
                                ReliabilityStats* stats = nullptr) {
  ReliabilityUnwrapper u(wr.height(), wr.width(), opt);
  auto ws = u.make_workspace();
  Image<float> out(wr.height(), wr.width());
  const auto st = u.apply(wr.view(), out.view(), ws);
  if (stats) *stats = st;
  return out;
}

} // namespace

TEST_CASE("reliability unwrapping recovers a 40 rad Gaussian bump exactly up to a constant") {
  // Herráez et al. 2002 [confirmed]: for a surface sampled finely enough
  // (|Δφ| < π between neighbours, no residues) any path gives the true
  // phase up to 2πk. Tolerance 2e-5 rad: the output is wrapped + 2πk in
  // float32; at 40 rad one float32 ulp is 3.8e-6, so a few ulp of rounding
  // in the truth, the wrapped input and the sum.
  for (auto [h, w] : {std::pair<std::size_t, std::size_t>{256, 256}, {127, 200}, {257, 131}}) {
    const double cy = 0.45 * double(h), cx = 0.55 * double(w), s = 0.18 * double(std::min(h, w));
    const Image<float> truth = analytic(h, w, [&](double y, double x) {
      return 40.0 * std::exp(-((y - cy) * (y - cy) + (x - cx) * (x - cx)) / (2 * s * s));
    });
    REQUIRE(truth(std::size_t(cy), std::size_t(cx)) >= 39.9f);
    ReliabilityStats st;
    const Image<float> out = unwrap_reliability(unwrap_test::wrapped(truth), {}, &st);
    const auto ag = compare_up_to_constant(out.view(), truth.view(), 2e-5);
    INFO(h << "x" << w << ": max error " << ag.max_error);
    CHECK(ag.max_error < 2e-5);
    CHECK(std::abs(ag.cycles - std::round(ag.cycles)) < 1e-5); // the constant is 2πk [derived]
    CHECK(st.groups == 1);
    CHECK(st.valid_pixels == h * w);
    CHECK(st.edges == (h - 1) * w + h * (w - 1)); // 4-neighbour edges of a full frame [derived]
  }
}

TEST_CASE("reliability unwrapping recovers a tilted plane plus paraboloid exactly up to a constant") {
  // Same source and tolerance reasoning as above; PV ≈ 120 rad, steepest
  // neighbour step 2.4 rad < π, so the wrapped differences are the true ones.
  const std::size_t h = 240, w = 320;
  const Image<float> truth = analytic(h, w, [&](double y, double x) {
    const double u = x / w - 0.3, v = y / h - 0.6;
    return 0.35 * x + 0.2 * y + 60.0 * (u * u + 0.8 * v * v);
  });
  REQUIRE(peak_to_valley(truth) >= 40.0);
  for (EdgeOrder order : {EdgeOrder::summed_second_difference, EdgeOrder::summed_reliability}) {
    ReliabilityOptions opt;
    opt.order = order;
    const Image<float> out = unwrap_reliability(unwrap_test::wrapped(truth), opt);
    const auto ag = compare_up_to_constant(out.view(), truth.view(), 1e-4);
    INFO("order " << int(order) << ": max error " << ag.max_error << ", PV " << peak_to_valley(truth));
    // At ~200 rad one float32 ulp is 1.5e-5: tolerance 1e-4 (≈ 7 ulp).
    CHECK(ag.max_error < 1e-4);
  }
}

TEST_CASE("scikit-image's documented example: 12π·exp(−(x²+y²)) on 128×128 over [−1,1]²") {
  // scikit-image reference documentation, unwrap_phase example [confirmed]:
  // std(unwrapped − true) < 1e-6 (float64 there). Here the input, the
  // output and the truth are float32: the truth peaks at 37.7 rad, where one
  // ulp is 3.8e-6, so rounding alone gives a std of ~ulp/√12 on the highest
  // pixels and ~5e-7 overall [derived]. We check the same 1e-6 bound on the
  // std, and max error < 1e-5 (≈ 3 ulp at the peak).
  const std::size_t n = 128;
  const Image<float> truth = analytic(n, n, [&](double y, double x) {
    const double c0 = -1.0 + 2.0 * y / double(n - 1), c1 = -1.0 + 2.0 * x / double(n - 1);
    return 12.0 * pi * std::exp(-(c0 * c0 + c1 * c1));
  });
  const Image<float> out = unwrap_reliability(unwrap_test::wrapped(truth));
  double mean = 0;
  for (std::size_t i = 0; i < out.size(); ++i) mean += double(out.data()[i]) - double(truth.data()[i]);
  mean /= double(out.size());
  double var = 0;
  for (std::size_t i = 0; i < out.size(); ++i) {
    const double d = double(out.data()[i]) - double(truth.data()[i]) - mean;
    var += d * d;
  }
  const double sd = std::sqrt(var / double(out.size()));
  const auto ag = compare_up_to_constant(out.view(), truth.view(), 1e-5);
  INFO("std " << sd << ", max " << ag.max_error);
  CHECK(sd < 1e-6);
  CHECK(ag.max_error < 1e-5);
}

TEST_CASE("reliability unwrapping with wrap-around recovers a surface periodic along x") {
  // scikit-image documentation [confirmed]: wrap_around treats the edges along
  // that axis as connected. A surface periodic in x with a 2π·m step across
  // the seam: along x the seam differences are then the true (wrapped)
  // ones, and the unwrapped result must be exact up to a constant. With the
  // option on, edges across the seam exist, so the edge count grows by h.
  const std::size_t h = 96, w = 128;
  const Image<float> truth = analytic(h, w, [&](double y, double x) {
    return 18.0 * std::sin(2 * pi * x / double(w)) + 0.25 * y + 5.0 * std::cos(2 * pi * x / double(w)) * y / h;
  });
  ReliabilityOptions opt;
  opt.wrap_x = true;
  ReliabilityStats st;
  const Image<float> out = unwrap_reliability(unwrap_test::wrapped(truth), opt, &st);
  const auto ag = compare_up_to_constant(out.view(), truth.view(), 2e-5);
  INFO("max error " << ag.max_error);
  CHECK(ag.max_error < 2e-5);
  CHECK(st.edges == (h - 1) * w + h * w); // [derived]
  opt.wrap_x = false;
  opt.wrap_y = true;
  const Image<float> out_y = unwrap_reliability(unwrap_test::wrapped(truth), opt, &st);
  CHECK(st.edges == h * w + h * (w - 1)); // [derived]
  // The surface is not periodic in y (0.25 rad/row ramp): the seam edges
  // carry a false wrapped difference, but that false step also enters the
  // seam pixels' second difference V (D² ≳ 1 against ~1e-3 inside), so every
  // interior edge comes first and has joined the frame before any seam edge
  // is reached [derived]: the result is still exact.
  CHECK(compare_up_to_constant(out_y.view(), truth.view(), 2e-5).max_error < 2e-5);
}

TEST_CASE("excluded pixels neither change nor guide their neighbours") {
  // scikit-image documentation for masked arrays [confirmed]: masked entries
  // are not changed and do not guide the unwrapping of unmasked neighbours.
  const std::size_t h = 150, w = 170;
  Image<float> truth = unwrap_test::synthetic_surface(h, w, 70.0);
  REQUIRE(unwrap_test::max_step(truth) < 2.5);
  Image<std::uint8_t> valid(h, w, 1);
  for (std::size_t y = 0; y < h; ++y)
    for (std::size_t x = 0; x < w; ++x) {
      const double r = std::hypot(double(y) - 75.0, double(x) - 85.0);
      if (r > 70.0 || (r < 15.0)) valid(y, x) = 0; // annulus
    }
  Image<float> wr = unwrap_test::wrapped(truth);
  ReliabilityUnwrapper u(h, w);
  auto ws = u.make_workspace();
  Image<float> out1(h, w), out2(h, w);
  const auto st1 = u.apply(wr.view(), valid.view(), out1.view(), ws);
  // Scramble the excluded pixels: the result on valid pixels must not move.
  Image<float> wr2 = wr;
  std::mt19937 rng(3);
  std::uniform_real_distribution<float> any(-3.f, 3.f);
  for (std::size_t i = 0; i < wr2.size(); ++i)
    if (!valid.data()[i]) wr2.data()[i] = any(rng);
  const auto st2 = u.apply(wr2.view(), valid.view(), out2.view(), ws);
  CHECK(st1.valid_pixels == st2.valid_pixels);
  CHECK(st1.groups == 1);
  std::size_t moved = 0, changed_excluded = 0;
  for (std::size_t i = 0; i < out1.size(); ++i) {
    if (valid.data()[i]) moved += out1.data()[i] != out2.data()[i];
    else changed_excluded += std::memcmp(&out2.data()[i], &wr2.data()[i], sizeof(float)) != 0;
  }
  CHECK(moved == 0);
  CHECK(changed_excluded == 0); // excluded pixels keep their input value
  std::vector<std::uint8_t> use(valid.begin(), valid.end());
  CHECK(compare_up_to_constant(out1.view(), truth.view(), 2e-5, &use).max_error < 2e-5);

  // invalid_value replaces them instead.
  ReliabilityOptions opt;
  opt.invalid_value = std::numeric_limits<float>::quiet_NaN();
  ReliabilityUnwrapper un(h, w, opt);
  auto wsn = un.make_workspace();
  un.apply(wr.view(), valid.view(), out2.view(), wsn);
  std::size_t nan_ok = 0, excluded = 0;
  for (std::size_t i = 0; i < out2.size(); ++i)
    if (!valid.data()[i]) ++excluded, nan_ok += std::isnan(out2.data()[i]);
  CHECK(nan_ok == excluded);
}

TEST_CASE("groups separated by excluded pixels are unwrapped independently") {
  // A full-height excluded column splits the frame: two groups, each exact up
  // to its own constant, each anchored (k = 0) at its first raster pixel.
  const std::size_t h = 64, w = 96;
  const Image<float> truth = unwrap_test::synthetic_surface(h, w, 20.0);
  REQUIRE(unwrap_test::max_step(truth) < 2.5); // finely sampled: the wrapped differences are true
  const Image<float> wr = unwrap_test::wrapped(truth);
  Image<std::uint8_t> valid(h, w, 1);
  for (std::size_t y = 0; y < h; ++y) valid(y, 40) = 0;
  ReliabilityUnwrapper u(h, w);
  auto ws = u.make_workspace();
  Image<float> out(h, w);
  const auto st = u.apply(wr.view(), valid.view(), out.view(), ws);
  CHECK(st.groups == 2);
  CHECK(st.largest_group == h * (w - 41));
  CHECK(out(0, 0) == wr(0, 0));
  CHECK(out(0, 41) == wr(0, 41));
  for (int side = 0; side < 2; ++side) {
    std::vector<std::uint8_t> use(h * w, 0);
    for (std::size_t y = 0; y < h; ++y)
      for (std::size_t x = 0; x < w; ++x) use[y * w + x] = side == 0 ? x < 40 : x > 40;
    CHECK(compare_up_to_constant(out.view(), truth.view(), 2e-5, &use).max_error < 2e-5);
  }
}

TEST_CASE("non-finite input pixels are excluded automatically") {
  const std::size_t h = 40, w = 50;
  const Image<float> truth = unwrap_test::synthetic_surface(h, w, 12.0);
  REQUIRE(unwrap_test::max_step(truth) < 2.5);
  Image<float> wr = unwrap_test::wrapped(truth);
  wr(10, 10) = std::numeric_limits<float>::quiet_NaN();
  wr(20, 30) = std::numeric_limits<float>::infinity();
  ReliabilityStats st;
  const Image<float> out = unwrap_reliability(wr, {}, &st);
  CHECK(st.valid_pixels == h * w - 2);
  CHECK(std::isnan(out(10, 10)));
  CHECK(std::isinf(out(20, 30)));
  std::vector<std::uint8_t> use(h * w, 1);
  use[10 * w + 10] = use[20 * w + 30] = 0;
  CHECK(compare_up_to_constant(out.view(), truth.view(), 2e-5, &use).max_error < 2e-5);
}

TEST_CASE("reliability unwrapping is deterministic, thread-safe and reuses its workspace") {
  // Noisy input with residues, where the path matters: two runs, two threads
  // and a reused workspace must give bit-identical results.
  const std::size_t h = 200, w = 180;
  Image<float> truth = unwrap_test::synthetic_surface(h, w, 80.0);
  unwrap_test::add_noise(truth, 0.9, 11);
  const Image<float> wr = unwrap_test::wrapped(truth);
  const Image<float> other = unwrap_test::wrapped(unwrap_test::synthetic_surface(h, w, 20.0));
  ReliabilityUnwrapper u(h, w);
  auto ws = u.make_workspace();
  Image<float> a(h, w), b(h, w), c(h, w), d(h, w);
  u.apply(wr.view(), a.view(), ws);
  u.apply(other.view(), b.view(), ws); // something else in between
  u.apply(wr.view(), b.view(), ws);
  std::thread t1([&] {
    auto w1 = u.make_workspace();
    u.apply(wr.view(), c.view(), w1);
  });
  std::thread t2([&] {
    auto w2 = u.make_workspace();
    u.apply(wr.view(), d.view(), w2);
  });
  t1.join();
  t2.join();
  CHECK(std::memcmp(a.data(), b.data(), a.size() * sizeof(float)) == 0);
  CHECK(std::memcmp(a.data(), c.data(), a.size() * sizeof(float)) == 0);
  CHECK(std::memcmp(a.data(), d.data(), a.size() * sizeof(float)) == 0);
  // The result is congruent to the input: out − wrapped is 2πk everywhere.
  std::size_t not_congruent = 0;
  for (std::size_t i = 0; i < a.size(); ++i) {
    const double k = (double(a.data()[i]) - double(wr.data()[i])) / two_pi;
    not_congruent += std::abs(k - std::round(k)) > 1e-5;
  }
  CHECK(not_congruent == 0);
  // In place: out may be the input's memory.
  Image<float> inplace = wr;
  u.apply(inplace.view(), inplace.view(), ws);
  CHECK(std::memcmp(a.data(), inplace.data(), a.size() * sizeof(float)) == 0);
}

TEST_CASE("reliability unwrapping handles degenerate sizes and rejects mismatches") {
  // One row: a 1-D unwrap; every pixel is a border pixel (same measure), so
  // the edges keep raster order, i.e. Itoh's sequential unwrapping.
  const Image<float> line = analytic(1, 50, [](double, double x) { return 0.9 * x; });
  CHECK(compare_up_to_constant(unwrap_reliability(unwrap_test::wrapped(line)).view(), line.view(), 1e-5).max_error <
        1e-5);
  const Image<float> one(1, 1, 2.5f);
  CHECK(unwrap_reliability(one)(0, 0) == 2.5f);
  // Values outside [−π, π) are wrapped first: the result is congruent to them.
  const Image<float> shifted = analytic(20, 20, [](double y, double x) { return 100.0 + 0.5 * x + 0.3 * y; });
  const Image<float> res = unwrap_reliability(shifted);
  CHECK(compare_up_to_constant(res.view(), shifted.view(), 1e-4).max_error < 1e-4);

  CHECK_THROWS_AS(ReliabilityUnwrapper(0, 10), Error);
  ReliabilityUnwrapper u(10, 12);
  auto ws = u.make_workspace();
  Image<float> a(10, 12, 0.f), b(10, 11);
  CHECK_THROWS_AS(u.apply(a.view(), b.view(), ws), Error);
  ReliabilityUnwrapper other(11, 12);
  auto ws_other = other.make_workspace();
  Image<float> c(10, 12);
  CHECK_THROWS_AS(u.apply(a.view(), c.view(), ws_other), Error);
}
