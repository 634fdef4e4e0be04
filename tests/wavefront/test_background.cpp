// Numerical aberration compensation: background fits under objects.
#include "wavefront_test_util.hpp"

#include "wavestack/core/error.hpp"
#include "wavestack/core/log.hpp"
#include "wavestack/wavefront/background.hpp"
#include "wavestack/wavefront/zernike.hpp"

#include <catch2/catch.hpp>

#include <cmath>
#include <random>
#include <thread>
#include <vector>

using namespace wavestack;
using namespace wavestack::wavefront;
using namespace wavefront_test;

namespace {

struct Cell {
  double col, row, a, b, peak; // semi-axes in pixels, peak phase in rad
};

/// Phase of ellipsoidal cells in the projection approximation:
/// φ = peak·sqrt(1 − (dx/a)² − (dy/b)²) inside (invented test objects).
Image<float> cells_phase(std::size_t h, std::size_t w, const std::vector<Cell>& cells) {
  Image<float> img(h, w, 0.0f);
  for (std::size_t r = 0; r < h; ++r)
    for (std::size_t c = 0; c < w; ++c) {
      double v = 0;
      for (const Cell& k : cells) {
        const double u = (static_cast<double>(c) - k.col) / k.a, t = (static_cast<double>(r) - k.row) / k.b;
        const double q = 1 - u * u - t * t;
        if (q > 0) v += k.peak * std::sqrt(q);
      }
      img(r, c) = static_cast<float>(v);
    }
  return img;
}

/// Instrument aberration in pixel units: tilt + off-centre curvature +
/// astigmatism, tens of radians across the frame (invented).
double aberration(double col, double row) {
  const double dx = col - 30.0, dy = row - 70.0;
  return 1.3 + 0.11 * col - 0.07 * row + 1.2e-3 * (dx * dx + dy * dy) + 4e-4 * (dx * dx - dy * dy);
}

double rms_difference(const Image<float>& a, const Image<float>& b) {
  double s = 0;
  for (std::size_t i = 0; i < a.size(); ++i) s += std::pow(static_cast<double>(a.data()[i]) - b.data()[i], 2);
  return std::sqrt(s / static_cast<double>(a.size()));
}

const std::vector<Cell> scene = {{40, 35, 14, 10, 2.5},  {100, 50, 18, 12, 3.0}, {60, 95, 10, 10, 1.2},
                                 {125, 105, 8, 14, 2.0}, {20, 110, 5, 5, 0.8},   {140, 20, 6, 4, 1.5}};

} // namespace

TEST_CASE("automatic background compensation removes a known tilt and curvature beneath objects") {
  // A quadratic instrument aberration (degree-2 model spans it exactly)
  // under six cells, plus white noise σ = 0.02 rad. After compensation the
  // frame must equal the cells' phase plus that noise: the error is the fit's
  // noise, σ·sqrt(J/N_bg) ≈ 4e-4 rad RMS [derived: a J-parameter least-
  // squares fit to N samples of white noise], plus any object rim left in the
  // background. Tolerance 2e-3 rad RMS over the frame (measured 3.4e-4 for
  // 136x160 and 4.1e-4 for 127x151: noise-limited), and 20× below the error
  // of a fit that does not exclude the objects (region = all; measured
  // 0.17 and 0.19 rad).
  for (auto shape : {std::pair<std::size_t, std::size_t>{136, 160}, {127, 151}}) {
    const std::size_t h = shape.first, w = shape.second;
    INFO(h << "x" << w);
    const Image<float> objects = cells_phase(h, w, scene);
    Image<float> expected = objects; // what compensation must leave: cells + noise
    add_noise(expected, 0.02, 5);
    Image<float> phase = expected;
    for (std::size_t r = 0; r < h; ++r)
      for (std::size_t c = 0; c < w; ++c)
        phase(r, c) = static_cast<float>(phase(r, c) + aberration(static_cast<double>(c), static_cast<double>(r)));

    BackgroundCompensator comp(h, w, {});
    REQUIRE(comp.terms() == 6);
    auto ws = comp.make_workspace();
    Image<float> out(h, w);
    std::vector<double> coef(6);
    const BackgroundFit info = comp.apply(phase.view(), {}, out.view(), coef, ws);
    const double err = rms_difference(out, expected);
    INFO("automatic: residual RMS " << err << " rad, " << info.background_pixels << " background pixels, fit RMS "
                                    << info.residual_rms);
    CHECK(err < 2e-3);
    CHECK(!info.fell_back);
    CHECK(info.iterations == 3);
    // The background RMS is the noise (σ = 0.02 rad) to within 10 %.
    CHECK(info.residual_rms == Approx(0.02).epsilon(0.1));
    // No object pixel is left in the background mask.
    std::size_t leaked = 0;
    for (std::size_t i = 0; i < objects.size(); ++i) leaked += objects.data()[i] > 0 && ws.background.data()[i];
    CHECK(leaked == 0);

    // The coefficients describe the aberration: evaluate() gives it back.
    Image<float> surface(h, w);
    comp.evaluate(coef, surface.view(), ws);
    double worst = 0;
    for (std::size_t r = 0; r < h; ++r)
      for (std::size_t c = 0; c < w; ++c)
        worst = std::max(worst, std::abs(surface(r, c) - aberration(static_cast<double>(c), static_cast<double>(r))));
    INFO("max surface error " << worst << " rad");
    CHECK(worst < 5e-3); // noise-limited, largest in the corners (measured 1.1e-3, 1.2e-3)

    BackgroundOptions all;
    all.region = BackgroundRegion::all;
    BackgroundCompensator naive(h, w, all);
    auto ws2 = naive.make_workspace();
    Image<float> out2(h, w);
    naive.apply(phase.view(), {}, out2.view(), coef, ws2);
    const double err_all = rms_difference(out2, expected);
    INFO("fit over all pixels: residual RMS " << err_all);
    CHECK(err_all > 20 * err);
  }
}

TEST_CASE("a given mask: exact recovery without noise, direct and complement sums") {
  // Without noise the masked least-squares fit reproduces the quadratic
  // (inside the model's span [derived]) to
  // float round-off of the inputs (values up to ~40 rad: ~4e-6 absolute),
  // whether the background covers less than half the frame (Gram matrix
  // summed over it) or more (summed over the complement). Tolerance 1e-4.
  const std::size_t h = 90, w = 110;
  Image<float> phase(h, w);
  for (std::size_t r = 0; r < h; ++r)
    for (std::size_t c = 0; c < w; ++c)
      phase(r, c) = static_cast<float>(aberration(static_cast<double>(c), static_cast<double>(r)));
  for (double fraction : {0.3, 0.8}) {
    INFO("mask fraction " << fraction);
    BackgroundOptions o;
    o.region = BackgroundRegion::mask;
    o.mask.resize(h, w);
    std::mt19937 rng(3);
    std::uniform_real_distribution<double> u(0, 1);
    Image<float> scrambled = phase;
    for (std::size_t i = 0; i < o.mask.size(); ++i) {
      o.mask.data()[i] = u(rng) < fraction;
      if (!o.mask.data()[i]) scrambled.data()[i] += 5.0f; // not background: must be ignored
    }
    BackgroundCompensator comp(h, w, o);
    auto ws = comp.make_workspace();
    std::vector<double> coef(6);
    Image<float> out(h, w);
    comp.apply(scrambled.view(), {}, out.view(), coef, ws);
    double worst = 0;
    for (std::size_t i = 0; i < out.size(); ++i)
      if (o.mask.data()[i]) worst = std::max(worst, std::abs(static_cast<double>(out.data()[i])));
      else worst = std::max(worst, std::abs(out.data()[i] - 5.0));
    CHECK(worst < 1e-4);
  }
}

TEST_CASE("polynomial coefficients are in documented frame coordinates") {
  // x = (col − cx)/r, y = (cy − row)/r, r = ½·hypot(w−1, h−1) (background.hpp):
  // φ = col is 1·cx + r·x, φ = −row is −cy + r·y [derived].
  const std::size_t h = 41, w = 60;
  BackgroundOptions o;
  o.region = BackgroundRegion::all;
  o.degree = 1;
  BackgroundCompensator comp(h, w, o);
  const double r = 0.5 * std::hypot(59.0, 40.0);
  CHECK(comp.coordinate_scale() == Approx(r));
  CHECK(comp.term_name(0) == "1");
  CHECK(comp.term_name(1) == "x");
  CHECK(comp.term_name(2) == "y");
  Image<float> colr(h, w), rowr(h, w), out(h, w);
  for (std::size_t y = 0; y < h; ++y)
    for (std::size_t x = 0; x < w; ++x) {
      colr(y, x) = static_cast<float>(x);
      rowr(y, x) = -static_cast<float>(y);
    }
  auto ws = comp.make_workspace();
  std::vector<double> c(3);
  comp.apply(colr.view(), {}, out.view(), c, ws);
  CHECK(c[0] == Approx(29.5).margin(1e-5));
  CHECK(c[1] == Approx(r).margin(1e-5));
  CHECK(std::abs(c[2]) < 1e-5);
  comp.apply(rowr.view(), {}, out.view(), c, ws);
  CHECK(c[0] == Approx(-20.0).margin(1e-5));
  CHECK(c[2] == Approx(r).margin(1e-5));
  BackgroundOptions o2;
  o2.degree = 3;
  BackgroundCompensator cubic(h, w, o2);
  CHECK(cubic.terms() == 10);
  CHECK(cubic.term_name(4) == "x y");
  CHECK(cubic.term_name(7) == "x^2 y");
  CHECK(cubic.term_name(9) == "y^3");
}

TEST_CASE("the Zernike background model fits chosen ANSI terms on the circumscribed circle") {
  // Background = Σ c_j Z_j(x, y) with (x, y) the frame coordinates of
  // background.hpp (corners on the unit circle); recovered to float
  // round-off (tolerance 1e-4 rad on coefficients of a few rad).
  const std::size_t h = 80, w = 100;
  const std::vector<int> terms = {0, 1, 2, 4};
  const std::vector<double> truth = {0.7, -3.0, 4.5, 2.2};
  const double cx = 49.5, cy = 39.5, r = 0.5 * std::hypot(99.0, 79.0);
  const Image<float> objects = cells_phase(h, w, {{30, 30, 9, 9, 2.0}, {70, 50, 12, 8, 1.5}});
  Image<float> phase = objects;
  std::vector<double> z(5);
  for (std::size_t row = 0; row < h; ++row)
    for (std::size_t col = 0; col < w; ++col) {
      zernike_basis((static_cast<double>(col) - cx) / r, (cy - static_cast<double>(row)) / r, z);
      double v = 0;
      for (std::size_t k = 0; k < terms.size(); ++k) v += truth[k] * z[static_cast<std::size_t>(terms[k])];
      phase(row, col) += static_cast<float>(v);
    }
  BackgroundOptions o;
  o.model = BackgroundModel::zernike;
  o.zernike_terms = terms;
  BackgroundCompensator comp(h, w, o);
  CHECK(comp.term_name(3) == "Z4 defocus");
  auto ws = comp.make_workspace();
  std::vector<double> c(4);
  Image<float> out(h, w);
  comp.apply(phase.view(), {}, out.view(), c, ws);
  for (std::size_t k = 0; k < 4; ++k) CHECK(c[k] == Approx(truth[k]).margin(1e-4));
  CHECK(rms_difference(out, objects) < 1e-4);
}

TEST_CASE("a Zernike fit over an annular part of a pupil (region = mask)") {
  // An obscured pupil: the fit sees only 0.3R <= r <= R of a pupil of radius
  // R = 40 px; the terms are not orthogonal on the annulus, the least-squares
  // fit still recovers a wavefront made of them to float round-off
  // (tolerance 1e-4 on coefficients of order 1). Pixels outside the annulus
  // hold garbage that must be ignored.
  const std::size_t n = 100;
  const Pupil pupil{49.5, 49.5, 40.0};
  const std::vector<double> truth = {0.3, -0.8, 0.5, 0.2, 1.1, -0.4, 0.15, -0.25, 0.35, 0.1};
  BackgroundOptions o;
  o.model = BackgroundModel::zernike;
  o.zernike_terms = {0, 1, 2, 3, 4, 5, 6, 7, 8, 9};
  o.zernike_pupil = pupil;
  o.region = BackgroundRegion::mask;
  o.mask.resize(n, n);
  Image<float> phase(n, n);
  std::vector<double> z(10);
  for (std::size_t r = 0; r < n; ++r)
    for (std::size_t c = 0; c < n; ++c) {
      const double x = (static_cast<double>(c) - pupil.cx) / pupil.radius;
      const double y = (pupil.cy - static_cast<double>(r)) / pupil.radius;
      const double rho = std::hypot(x, y);
      const bool in = rho <= 1 && rho >= 0.3;
      o.mask(r, c) = in;
      zernike_basis(x, y, z);
      double v = 0;
      for (std::size_t j = 0; j < 10; ++j) v += truth[j] * z[j];
      phase(r, c) = in ? static_cast<float>(v) : 100.0f;
    }
  BackgroundCompensator comp(n, n, o);
  CHECK(comp.zernike_pupil().radius == 40.0);
  auto ws = comp.make_workspace();
  std::vector<double> c(10);
  Image<float> out(n, n);
  comp.apply(phase.view(), {}, out.view(), c, ws);
  for (std::size_t j = 0; j < 10; ++j) CHECK(c[j] == Approx(truth[j]).margin(1e-4));
}

TEST_CASE("the amplitude test excludes objects that barely change the phase") {
  // A 20x20 absorbing patch: amplitude 0.5 instead of 1 (noise 0.01), phase
  // step 0.03 rad, below the level test (max(4σ, 0.02 rad) with σ ≈ 0.02)
  // and the gradient test. Only the amplitude criterion (4 robust σ) can
  // find it; with the amplitude passed every patch pixel is excluded.
  const std::size_t h = 80, w = 80;
  Image<float> phase(h, w, 0.0f), amp(h, w, 1.0f);
  add_noise(phase, 0.02, 9);
  add_noise(amp, 0.01, 10);
  for (std::size_t r = 30; r < 50; ++r)
    for (std::size_t c = 30; c < 50; ++c) {
      phase(r, c) += 0.03f;
      amp(r, c) -= 0.5f;
    }
  BackgroundCompensator comp(h, w, {});
  auto ws = comp.make_workspace();
  std::vector<double> c(6);
  Image<float> out(h, w);
  auto patch_in_background = [&] {
    std::size_t n = 0;
    for (std::size_t r = 30; r < 50; ++r)
      for (std::size_t col = 30; col < 50; ++col) n += ws.background(r, col);
    return n;
  };
  comp.apply(phase.view(), {}, out.view(), c, ws);
  const std::size_t without = patch_in_background();
  comp.apply(phase.view(), amp.view(), out.view(), c, ws);
  const std::size_t with = patch_in_background();
  INFO("patch pixels kept as background: " << without << " without amplitude, " << with << " with");
  CHECK(without > 200);
  CHECK(with == 0);
  // The dilation (3 px) also drops the rim around the patch.
  CHECK(ws.background(28, 40) == 0);
  CHECK(ws.background(40, 52) == 0);
  CHECK(ws.background(5, 5) == 1);
}

TEST_CASE("too little background left: keep the previous region and warn") {
  // With min_background_fraction = 0.9 the detected cells (~20 % of the
  // frame with their rims) leave too little: the compensator must keep the
  // previous region, flag it and log one warning.
  const std::size_t h = 136, w = 160;
  Image<float> phase = cells_phase(h, w, scene);
  add_noise(phase, 0.02, 4);
  BackgroundOptions o;
  o.min_background_fraction = 0.9;
  BackgroundCompensator comp(h, w, o);
  auto ws = comp.make_workspace();
  std::vector<double> c(6);
  Image<float> out(h, w);
  log::clear_warnings();
  const auto info = comp.apply(phase.view(), {}, out.view(), c, ws);
  CHECK(info.fell_back);
  CHECK(info.iterations == 1);
  CHECK(info.background_pixels == h * w);
  CHECK(log::warnings().size() == 1);
}

TEST_CASE("non-finite pixels are never background and stay non-finite; in-place apply") {
  const std::size_t h = 50, w = 64;
  Image<float> phase(h, w);
  for (std::size_t r = 0; r < h; ++r)
    for (std::size_t c = 0; c < w; ++c) phase(r, c) = static_cast<float>(0.05 * c + 0.02 * r);
  phase(10, 10) = std::nanf("");
  phase(20, 30) = INFINITY;
  BackgroundOptions o;
  o.degree = 1;
  BackgroundCompensator comp(h, w, o);
  auto ws = comp.make_workspace();
  std::vector<double> c(3);
  comp.apply(phase.view(), {}, phase.view(), c, ws); // in place
  CHECK(std::isnan(phase(10, 10)));
  CHECK(!std::isfinite(phase(20, 30)));
  CHECK(ws.background(10, 10) == 0);
  CHECK(std::abs(phase(0, 0)) < 1e-5);
  CHECK(std::abs(phase(49, 63)) < 1e-5);
}

TEST_CASE("background option errors") {
  BackgroundOptions o;
  o.degree = 9;
  CHECK_THROWS_AS(BackgroundCompensator(32, 32, o), Error);
  o = {};
  o.region = BackgroundRegion::mask; // no mask
  CHECK_THROWS_AS(BackgroundCompensator(32, 32, o), Error);
  o = {};
  o.mask.resize(31, 32);
  CHECK_THROWS_AS(BackgroundCompensator(32, 32, o), Error);
  o = {};
  o.model = BackgroundModel::zernike;
  o.zernike_terms = {0, 1, 1};
  CHECK_THROWS_AS(BackgroundCompensator(32, 32, o), Error);
  o = {};
  o.min_background_fraction = 1.0;
  CHECK_THROWS_AS(BackgroundCompensator(32, 32, o), Error);
  BackgroundCompensator ok(32, 32, {});
  auto ws = ok.make_workspace();
  std::vector<double> c(5);
  Image<float> img(32, 32, 0.0f);
  CHECK_THROWS_AS(ok.apply(img.view(), {}, img.view(), c, ws), Error);
}

TEST_CASE("concurrent background compensation with separate workspaces matches the serial result") {
  const std::size_t h = 96, w = 120;
  std::vector<Image<float>> frames;
  for (unsigned k = 0; k < 4; ++k) {
    Image<float> f = cells_phase(h, w, {{30.0 + 10 * k, 40, 10, 8, 2.0}, {90, 70, 8, 12, 1.0}});
    for (std::size_t r = 0; r < h; ++r)
      for (std::size_t c = 0; c < w; ++c) f(r, c) += static_cast<float>(aberration(static_cast<double>(c), static_cast<double>(r)));
    add_noise(f, 0.02, 40 + k);
    frames.push_back(std::move(f));
  }
  const BackgroundCompensator comp(h, w, {});
  std::vector<std::vector<double>> serial(4, std::vector<double>(6)), threaded = serial;
  auto ws = comp.make_workspace();
  Image<float> out(h, w);
  for (std::size_t k = 0; k < 4; ++k) comp.apply(frames[k].view(), {}, out.view(), serial[k], ws);
  std::vector<std::thread> th;
  for (std::size_t t = 0; t < 2; ++t)
    th.emplace_back([&, t] {
      auto wt = comp.make_workspace();
      Image<float> o(h, w);
      for (int rep = 0; rep < 3; ++rep)
        for (std::size_t k = t; k < 4; k += 2) comp.apply(frames[k].view(), {}, o.view(), threaded[k], wt);
    });
  for (auto& t : th) t.join();
  for (std::size_t k = 0; k < 4; ++k) CHECK(serial[k] == threaded[k]);
}
