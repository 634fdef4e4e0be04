#include "python_reference.hpp"

#include "wavestack/core/error.hpp"
#include "wavestack/fringe/conditioner.hpp"

#include <catch2/catch.hpp>

#include <cmath>
#include <random>

using namespace wavestack;
using namespace wavestack::fringe;

namespace {

Image<float> random_image(std::size_t h, std::size_t w, unsigned seed, float offset = 0.0f) {
  std::mt19937 rng(seed);
  std::uniform_real_distribution<float> u(0.0f, 1.0f);
  Image<float> img(h, w);
  for (float& v : img) v = offset + u(rng);
  return img;
}

std::vector<double> to_f64(const Image<float>& img) { return {img.begin(), img.end()}; }

/// Dirichlet kernel: response of a k-sample centred box mean to cos(2π f n).
double box_response(int k, double f) {
  return std::sin(M_PI * k * f) / (k * std::sin(M_PI * f));
}

} // namespace

TEST_CASE("mean DC removal leaves a zero-mean frame") {
  // Definition of mean removal [common practice]. Tolerance: values near 100
  // in float32 carry an ulp of 7.6e-6; 2e-5 allows a few roundings.
  Image<float> img = random_image(61, 83, 1, 100.0f);
  double mean_before = 0;
  for (float v : img) mean_before += v;
  mean_before /= static_cast<double>(img.size());
  const Image<float> original = img;

  Conditioner c(61, 83, ConditionerOptions{DcMode::mean});
  auto ws = c.make_workspace();
  c.apply(img.view(), ws);

  double mean_after = 0;
  for (float v : img) mean_after += v;
  mean_after /= static_cast<double>(img.size());
  CHECK(std::abs(mean_after) < 2e-5);
  for (std::size_t i = 0; i < img.size(); ++i)
    REQUIRE(img.data()[i] == Approx(original.data()[i] - mean_before).margin(2e-5));
}

TEST_CASE("local DC removal matches scipy.ndimage.uniform_filter with mode reflect") {
  // Outside reference: scipy.ndimage.uniform_filter(img, k, mode="reflect")
  // through tests/fringe/reference_filters.py [common practice: box-filter
  // background estimate; scipy's reflect = half-sample symmetric extension].
  // Tolerance 1e-5 on values in [0,1): the box means are stored in float32
  // (ulp 6e-8) and the running sums are double, so 1e-5 is a wide margin.
  struct Case { std::size_t h, w; int k; };
  const Case cases[] = {{67, 90, 7}, {67, 90, 15}, {30, 41, 45} /* box wider than the frame */, {1, 9, 3}};
  for (const Case& cs : cases) {
    CAPTURE(cs.h, cs.w, cs.k);
    Image<float> img = random_image(cs.h, cs.w, 7u + static_cast<unsigned>(cs.k));
    const auto in_path = fringe_test::temp_path("uniform_in");
    const auto out_path = fringe_test::temp_path("uniform_out");
    fringe_test::write_f64(in_path, to_f64(img));
    REQUIRE(fringe_test::run_reference("uniform " + fringe_test::quoted(in_path) + " " +
                                       fringe_test::quoted(out_path) + " " + std::to_string(cs.h) +
                                       " " + std::to_string(cs.w) + " " + std::to_string(cs.k)) == 0);
    const auto ref = fringe_test::read_f64(out_path, cs.h * cs.w);
    REQUIRE(ref.size() == cs.h * cs.w);
    const Image<float> original = img;

    ConditionerOptions o;
    o.dc = DcMode::local;
    o.local_window = cs.k;
    Conditioner c(cs.h, cs.w, o);
    REQUIRE(c.local_window() == cs.k);
    auto ws = c.make_workspace();
    c.apply(img.view(), ws);
    double worst = 0;
    for (std::size_t i = 0; i < img.size(); ++i)
      worst = std::max(worst, std::abs(static_cast<double>(img.data()[i]) -
                                       (static_cast<double>(original.data()[i]) - ref[i])));
    CHECK(worst < 1e-5);
    std::remove(in_path.c_str());
    std::remove(out_path.c_str());
  }
}

TEST_CASE("local DC removal removes a slow background and keeps short-period fringes") {
  // A k-sample centred box mean passes cos(2π f n) scaled by the Dirichlet
  // kernel D_k(f) = sin(π k f)/(k sin(π f)); separable in 2-D, so away from
  // the border the output is (1 - D_k(fy) D_k(fx))·fringe plus the part of
  // the background the box does not follow, (k²-1)/24·∇²B [derived from the
  // box-filter definition; Taylor expansion of the box mean].
  // Background 1 + 4 exp(-r²/(2·70²)): (k²-1)/24·|∇²B| <= 0.015 for k = 15,
  // so the interior error bound 0.03 is twice that.
  const std::size_t h = 128, w = 160;
  const int k = 15;
  const double fy = 1.0 / 5.3, fx = 1.0 / 4.1;
  Image<float> img(h, w), fringe(h, w);
  for (std::size_t y = 0; y < h; ++y)
    for (std::size_t x = 0; x < w; ++x) {
      const double dy = y - 64.0, dx = x - 80.0;
      const double b = 1.0 + 4.0 * std::exp(-(dy * dy + dx * dx) / (2 * 70.0 * 70.0));
      const double f = std::cos(2 * M_PI * (fy * y + fx * x));
      fringe(y, x) = static_cast<float>(f);
      img(y, x) = static_cast<float>(b + f);
    }
  Image<float> with_mean = img;

  ConditionerOptions o;
  o.dc = DcMode::local;
  o.local_window = k;
  Conditioner c(h, w, o);
  auto ws = c.make_workspace();
  c.apply(img.view(), ws);

  const double keep = 1.0 - box_response(k, fy) * box_response(k, fx);
  double worst = 0, rms_mean_mode = 0;
  std::size_t n = 0;
  Conditioner cm(h, w, ConditionerOptions{DcMode::mean});
  auto wsm = cm.make_workspace();
  cm.apply(with_mean.view(), wsm);
  for (std::size_t y = k; y + k < h; ++y)
    for (std::size_t x = k; x + k < w; ++x) {
      worst = std::max(worst, std::abs(img(y, x) - keep * fringe(y, x)));
      const double e = with_mean(y, x) - fringe(y, x);
      rms_mean_mode += e * e;
      ++n;
    }
  rms_mean_mode = std::sqrt(rms_mean_mode / static_cast<double>(n));
  CHECK(worst < 0.03);
  // The same frame with plain mean removal keeps the background: the check
  // above is not passed trivially.
  CHECK(rms_mean_mode > 0.3);
}

TEST_CASE("automatic local window follows the documented rule") {
  // Documented in conditioner.hpp: nearest odd to min(h,w)/32 (>= 3), or the
  // smallest odd >= 4 fringe periods [common practice].
  ConditionerOptions o;
  o.dc = DcMode::local;
  CHECK(Conditioner(256, 300, o).local_window() == 9);
  CHECK(Conditioner(64, 64, o).local_window() == 3);
  o.fringe_period = 4.3;
  CHECK(Conditioner(256, 300, o).local_window() == 19);
  o.fringe_period = 40.0; // 161 > min side 100: capped at the side (odd)
  CHECK(Conditioner(100, 300, o).local_window() == 99);
}

TEST_CASE("Tukey window matches scipy.signal.windows.tukey") {
  // Harris, Proc. IEEE 66(1) 51 (1978), tapered cosine window [from memory];
  // outside reference scipy.signal.windows.tukey(n, alpha, sym=True) through
  // tests/fringe/reference_filters.py. Tolerance 1e-12 for the double table;
  // 1e-6 for the float32 2-D window (product of two float roundings, ulp 6e-8).
  // One script run for every (n, alpha) pair; the last two pairs are the
  // axes of the 2-D check below.
  struct Pair { std::size_t n; double alpha; };
  std::vector<Pair> pairs;
  for (std::size_t n : {37, 64, 2, 5})
    for (double a : {0.0, 0.1, 0.25, 0.5, 1.0}) pairs.push_back({n, a});
  const std::size_t h = 37, w = 64;
  pairs.push_back({h, 0.25});
  pairs.push_back({w, 0.25});
  std::string args;
  std::size_t total = 0;
  for (const Pair& p : pairs) {
    args += " " + std::to_string(p.n) + ":" + std::to_string(p.alpha);
    total += p.n;
  }
  const auto path = fringe_test::temp_path("tukey");
  REQUIRE(fringe_test::run_reference("tukey " + fringe_test::quoted(path) + args) == 0);
  const auto ref = fringe_test::read_f64(path, total);
  REQUIRE(ref.size() == total);
  std::remove(path.c_str());
  std::size_t off = 0;
  for (const Pair& p : pairs) {
    CAPTURE(p.n, p.alpha);
    const auto mine = tukey_window(p.n, p.alpha);
    for (std::size_t i = 0; i < p.n; ++i) REQUIRE(mine[i] == Approx(ref[off + i]).margin(1e-12));
    off += p.n;
  }

  // 2-D: outer product of the 1-D windows, applied to a frame of ones.
  const double* ry = ref.data() + total - h - w;
  const double* rx = ref.data() + total - w;
  ConditionerOptions o;
  o.dc = DcMode::none;
  o.tukey = true;
  o.tukey_alpha = 0.25;
  Conditioner c(h, w, o);
  Image<float> ones(h, w, 1.0f);
  auto ws = c.make_workspace();
  c.apply(ones.view(), ws);
  for (std::size_t y = 0; y < h; ++y)
    for (std::size_t x = 0; x < w; ++x) REQUIRE(ones(y, x) == Approx(ry[y] * rx[x]).margin(1e-6));
}

TEST_CASE("the Tukey window is applied after DC removal") {
  // Order of operations documented in conditioner.hpp [common practice: a
  // window applied before mean removal would leave a windowed DC pedestal].
  // Tolerance 1e-5: float32 values of order 4.
  const std::size_t h = 40, w = 52;
  Image<float> img = random_image(h, w, 3, 3.0f);
  const Image<float> original = img;
  double mean = 0;
  for (float v : original) mean += v;
  mean /= static_cast<double>(original.size());
  ConditionerOptions o;
  o.dc = DcMode::mean;
  o.tukey = true;
  o.tukey_alpha = 0.5;
  Conditioner c(h, w, o);
  auto ws = c.make_workspace();
  c.apply(img.view(), ws);
  const auto wy = tukey_window(h, 0.5), wx = tukey_window(w, 0.5);
  for (std::size_t y = 0; y < h; ++y)
    for (std::size_t x = 0; x < w; ++x)
      REQUIRE(img(y, x) == Approx((original(y, x) - mean) * wy[y] * wx[x]).margin(1e-5));
}

TEST_CASE("background division flattens the illumination envelope") {
  // I = B·(1 + m cos) divided by B gives 1 + m cos [common practice: flat-field
  // normalisation]. Tolerance 1e-5 relative: one reciprocal and one product
  // in float32.
  const std::size_t h = 48, w = 70;
  Image<float> bg = random_image(h, w, 11, 0.5f); // in [0.5, 1.5)
  Image<float> img(h, w), expected(h, w);
  for (std::size_t y = 0; y < h; ++y)
    for (std::size_t x = 0; x < w; ++x) {
      const double f = 1.0 + 0.3 * std::cos(2 * M_PI * (0.21 * x + 0.13 * y));
      expected(y, x) = static_cast<float>(f);
      img(y, x) = static_cast<float>(bg(y, x) * f);
    }
  Image<float> img_mean = img;

  ConditionerOptions o;
  o.dc = DcMode::none;
  Conditioner c(h, w, o, &bg);
  CHECK(c.has_background());
  auto ws = c.make_workspace();
  c.apply(img.view(), ws);
  for (std::size_t i = 0; i < img.size(); ++i)
    REQUIRE(img.data()[i] == Approx(expected.data()[i]).epsilon(1e-5));

  // Background division happens before DC removal: the mean-mode result is
  // the normalised frame minus its own mean.
  double mean = 0;
  for (float v : expected) mean += v;
  mean /= static_cast<double>(expected.size());
  Conditioner cm(h, w, ConditionerOptions{DcMode::mean}, &bg);
  auto wsm = cm.make_workspace();
  cm.apply(img_mean.view(), wsm);
  for (std::size_t i = 0; i < img.size(); ++i)
    REQUIRE(img_mean.data()[i] == Approx(expected.data()[i] - mean).margin(1e-5));
}

TEST_CASE("dark and invalid background pixels are clamped, not divided by") {
  // Clamp rule documented in conditioner.hpp: b -> max(b, 1e-3 · mean(b)).
  const std::size_t h = 8, w = 9;
  Image<float> bg(h, w, 2.0f);
  bg(1, 1) = 0.0f;
  bg(2, 3) = -5.0f;
  bg(4, 4) = std::nanf("");
  double mean = 0;
  std::size_t n = 0;
  for (float v : bg)
    if (std::isfinite(v)) {
      mean += v;
      ++n;
    }
  mean /= static_cast<double>(n);
  Image<float> img(h, w, 1.0f);
  Conditioner c(h, w, ConditionerOptions{DcMode::none}, &bg);
  auto ws = c.make_workspace();
  c.apply(img.view(), ws);
  for (float v : img) REQUIRE(std::isfinite(v));
  const double floor = background_epsilon * mean;
  CHECK(img(1, 1) == Approx(1.0 / floor).epsilon(1e-6));
  CHECK(img(2, 3) == Approx(1.0 / floor).epsilon(1e-6));
  CHECK(img(4, 4) == Approx(1.0 / floor).epsilon(1e-6));
  CHECK(img(0, 0) == Approx(0.5).epsilon(1e-7));
}

TEST_CASE("a background of another size is an input error naming both sizes") {
  Image<float> bg(10, 12, 1.0f);
  try {
    Conditioner c(12, 10, ConditionerOptions{}, &bg);
    FAIL("no error for a 10x12 background with 12x10 frames");
  } catch (const Error& e) {
    CHECK(e.kind() == ErrorKind::input);
    const std::string m = e.what();
    CHECK(m.find("10x12") != std::string::npos);
    CHECK(m.find("12x10") != std::string::npos);
  }
  Image<float> black(12, 10, 0.0f);
  CHECK_THROWS_AS(Conditioner(12, 10, ConditionerOptions{}, &black), Error);
}

TEST_CASE("a frame of another size is an input error") {
  Conditioner c(20, 30, ConditionerOptions{});
  auto ws = c.make_workspace();
  Image<float> img(30, 20, 1.0f);
  try {
    c.apply(img.view(), ws);
    FAIL("no error for a 30x20 frame");
  } catch (const Error& e) {
    CHECK(e.kind() == ErrorKind::input);
    CHECK(std::string(e.what()).find("30x20") != std::string::npos);
  }
}

TEST_CASE("bad conditioning options are configuration errors") {
  auto kind_of = [](ConditionerOptions o) {
    try {
      Conditioner c(16, 16, o);
    } catch (const Error& e) {
      return e.kind();
    }
    return ErrorKind::internal; // no error at all
  };
  ConditionerOptions o;
  o.tukey_alpha = 1.5;
  CHECK(kind_of(o) == ErrorKind::config);
  o = {};
  o.tukey_alpha = -0.1;
  CHECK(kind_of(o) == ErrorKind::config);
  o = {};
  o.dc = DcMode::local;
  o.local_window = 8;
  CHECK(kind_of(o) == ErrorKind::config);
  o.local_window = -3;
  CHECK(kind_of(o) == ErrorKind::config);
  CHECK_THROWS_AS(Conditioner(0, 16, ConditionerOptions{}), Error);
}

TEST_CASE("conditioning works on strided views and does not reallocate its workspace") {
  // A sub-window of a larger image (stride != width) gives the same result as
  // a contiguous copy; workspace buffers keep their addresses (no allocation
  // in apply, the plan-time contract of DESIGN.md).
  const std::size_t h = 33, w = 47;
  Image<float> big = random_image(h + 4, w + 6, 5);
  Image<float> copy(h, w);
  for (std::size_t y = 0; y < h; ++y)
    for (std::size_t x = 0; x < w; ++x) copy(y, x) = big(y + 2, x + 3);
  ConditionerOptions o;
  o.dc = DcMode::local;
  o.local_window = 5;
  o.tukey = true;
  Conditioner c(h, w, o);
  auto ws = c.make_workspace();
  const float* p_row = ws.row_mean.data();
  const double* p_col = ws.column.data();
  c.apply(big.view().sub(2, 3, h, w), ws);
  c.apply(copy.view(), ws);
  CHECK(ws.row_mean.data() == p_row);
  CHECK(ws.column.data() == p_col);
  for (std::size_t y = 0; y < h; ++y)
    for (std::size_t x = 0; x < w; ++x) REQUIRE(big(y + 2, x + 3) == copy(y, x));
}
