// Least-squares unwrapping by the DCT Poisson solver and weighted PCG
// (Ghiglia & Romero, JOSA A 11(1) 107 (1994); Ghiglia & Pritt,
// Two-Dimensional Phase Unwrapping (Wiley 1998)).
#include "unwrap_test_util.hpp"

#include "wavestack/core/error.hpp"
#include "wavestack/unwrap/least_squares.hpp"
#include "wavestack/unwrap/quality.hpp"
#include "wavestack/unwrap/reliability.hpp"
#include "wavestack/unwrap/residues.hpp"

#include <catch2/catch.hpp>

#include <cmath>
#include <cstring>
#include <random>
#include <thread>

using namespace wavestack;
using namespace wavestack::unwrap;
using unwrap_test::compare_up_to_constant;

namespace {

/// RMS of a − b − mean(a − b) over pixels where use != 0 (all when null).
double rms_up_to_constant(const Image<float>& a, const Image<float>& b, const std::vector<std::uint8_t>* use = nullptr) {
  double s = 0, n = 0;
  for (std::size_t i = 0; i < a.size(); ++i)
    if (!use || (*use)[i]) s += double(a.data()[i]) - double(b.data()[i]), ++n;
  const double m = s / n;
  double q = 0;
  for (std::size_t i = 0; i < a.size(); ++i)
    if (!use || (*use)[i]) {
      const double d = double(a.data()[i]) - double(b.data()[i]) - m;
      q += d * d;
    }
  return std::sqrt(q / n);
}

double rms(const Image<float>& a) {
  double s = 0, q = 0;
  for (float v : a) s += v;
  const double m = s / double(a.size());
  for (float v : a) q += (v - m) * (v - m);
  return std::sqrt(q / double(a.size()));
}

/// Plane fit φ ≈ c + sy·y + sx·x in double; returns {sy, sx}.
std::pair<double, double> plane_slopes(const Image<float>& a) {
  // Normal equations on centred coordinates (then the three decouple).
  const double cy = (double(a.height()) - 1) / 2, cx = (double(a.width()) - 1) / 2;
  double syy = 0, sxx = 0, sy = 0, sx = 0;
  for (std::size_t y = 0; y < a.height(); ++y)
    for (std::size_t x = 0; x < a.width(); ++x) {
      const double u = double(y) - cy, v = double(x) - cx;
      syy += u * u, sxx += v * v, sy += u * a(y, x), sx += v * a(y, x);
    }
  return {sy / syy, sx / sxx};
}

Image<float> gaussian_bump_and_tilt(std::size_t h, std::size_t w, double peak) {
  Image<float> t(h, w);
  const double cy = 0.45 * h, cx = 0.52 * w, s = 0.2 * double(std::min(h, w));
  for (std::size_t y = 0; y < h; ++y)
    for (std::size_t x = 0; x < w; ++x)
      t(y, x) = static_cast<float>(peak * std::exp(-((y - cy) * (y - cy) + (x - cx) * (x - cx)) / (2 * s * s)) +
                                   0.3 * double(x) - 0.15 * double(y));
  return t;
}

} // namespace

TEST_CASE("the DCT Poisson solver recovers a random field from its exact differences") {
  // REFERENCES.md "Least squares by DCT" [derived]: the DCT-II diagonalises
  // the Neumann Laplacian with eigenvalues 2cos(πi/M) + 2cos(πj/N) − 4, so
  // integrating the exact differences of any field returns it up to a
  // constant (about 1e-15 in double). In float32 the transform round-off
  // (~1e-7 relative per coefficient) is amplified at the lowest frequencies
  // by 1/|eigenvalue| ≈ N²/π²; measured relative RMS errors are ~1e-6 for
  // 64² ... 300², so the tolerance is 2e-5 relative to the field's RMS.
  for (auto [h, w] : {std::pair<std::size_t, std::size_t>{64, 64}, {127, 131}, {200, 300}, {1, 50}, {37, 1}}) {
    std::mt19937 rng(unsigned(h * 1000 + w));
    std::uniform_real_distribution<double> u(-5.0, 5.0);
    Image<double> f(h, w);
    for (auto& v : f) v = u(rng);
    Image<float> field(h, w), gx(h, w, 0.f), gy(h, w, 0.f);
    for (std::size_t y = 0; y < h; ++y)
      for (std::size_t x = 0; x < w; ++x) {
        field(y, x) = static_cast<float>(f(y, x));
        if (x + 1 < w) gx(y, x) = static_cast<float>(f(y, x + 1) - f(y, x));
        if (y + 1 < h) gy(y, x) = static_cast<float>(f(y + 1, x) - f(y, x));
      }
    LeastSquaresUnwrapper ls(h, w);
    auto ws = ls.make_workspace();
    Image<float> out(h, w);
    const auto st = ls.integrate(gy.view(), gx.view(), out.view(), ws);
    CHECK(st.iterations == 0);
    const double rel = rms_up_to_constant(out, field) / rms(field);
    double mean = 0;
    for (float v : out) mean += v;
    mean /= double(out.size());
    INFO(h << "x" << w << ": relative RMS error " << rel << ", mean " << mean);
    CHECK(rel < 2e-5);
    CHECK(std::abs(mean) < 1e-4); // the free constant is set to zero mean [derived: DC coefficient 0]
  }
}

TEST_CASE("least squares recovers an analytic surface from noisy wrapped phase") {
  // Ghiglia & Romero 1994 [from memory]: when the wrapped differences are the
  // true differences (no residues), the least-squares solution is the true
  // unwrapped phase up to a constant. Here: 40 rad Gaussian bump + tilt,
  // noise 0.25 rad (no residues: checked). The result must then equal the
  // noisy phase itself to float precision (tolerance 1e-4 rad RMS: the
  // float32 DCT error of the previous test times the field's RMS of ~15
  // rad) and the noise-free surface to the noise level (RMS ≈ 0.25 rad).
  // With the congruence step the result equals the reliability unwrapper's
  // (same truth) to float32 rounding.
  const std::size_t h = 256, w = 256;
  const Image<float> clean = gaussian_bump_and_tilt(h, w, 40.0);
  Image<float> noisy = clean;
  unwrap_test::add_noise(noisy, 0.25, 17);
  const Image<float> wr = unwrap_test::wrapped(noisy);
  REQUIRE(count_residues(wr.view()).total() == 0);
  LeastSquaresUnwrapper ls(h, w);
  auto ws = ls.make_workspace();
  Image<float> out(h, w);
  ls.apply(wr.view(), out.view(), ws);
  const double e_noisy = rms_up_to_constant(out, noisy), e_clean = rms_up_to_constant(out, clean);
  INFO("RMS error vs the noisy phase " << e_noisy << ", vs the clean surface " << e_clean);
  CHECK(e_noisy < 1e-4);
  CHECK(e_clean < 0.3);
  CHECK(e_clean > 0.2); // it is the noisy phase, not a smoothed one

  LeastSquaresOptions opt;
  opt.congruent = true;
  LeastSquaresUnwrapper lsc(h, w, opt);
  Image<float> cong(h, w), rel(h, w);
  lsc.apply(wr.view(), cong.view(), ws);
  ReliabilityUnwrapper ru(h, w);
  auto rws = ru.make_workspace();
  ru.apply(wr.view(), rel.view(), rws);
  const auto ag = compare_up_to_constant(cong.view(), rel.view(), 5e-5);
  INFO("congruent LS vs reliability: max difference " << ag.max_error);
  CHECK(ag.within == ag.pixels);
}

TEST_CASE("unweighted least squares underestimates slopes where residues are present") {
  // Ghiglia & Romero 1994 / Ghiglia & Pritt 1998 [from memory]: unweighted
  // least squares is biased where the wrapped gradient has residues; noisy
  // differences near ±π wrap to the wrong side, which pulls the estimated
  // slope towards zero. Quantitative check: a steep tilt (1.3 and −0.9
  // rad/pixel) without noise is recovered with a plane-fit slope within
  // 1e-4 of the truth; with 0.9 rad noise (hundreds of residues) the fitted
  // slopes fall below 95% of the true ones, while the reliability unwrapper,
  // congruent by construction, stays within 5%. Measured: 2434 residues, LS
  // slope ratios 0.75 (y) and 0.66 (x); reliability 0.97 and 1.01.
  const std::size_t h = 128, w = 128;
  const double ay = -0.9, ax = 1.3;
  Image<float> clean(h, w);
  for (std::size_t y = 0; y < h; ++y)
    for (std::size_t x = 0; x < w; ++x) clean(y, x) = static_cast<float>(ay * double(y) + ax * double(x));
  LeastSquaresUnwrapper ls(h, w);
  auto ws = ls.make_workspace();
  Image<float> out(h, w);
  ls.apply(unwrap_test::wrapped(clean).view(), out.view(), ws);
  auto [sy0, sx0] = plane_slopes(out);
  CHECK(std::abs(sy0 / ay - 1) < 1e-4);
  CHECK(std::abs(sx0 / ax - 1) < 1e-4);

  Image<float> noisy = clean;
  unwrap_test::add_noise(noisy, 0.9, 4);
  const Image<float> wr = unwrap_test::wrapped(noisy);
  const auto res = count_residues(wr.view());
  ls.apply(wr.view(), out.view(), ws);
  auto [sy, sx] = plane_slopes(out);
  ReliabilityUnwrapper ru(h, w);
  auto rws = ru.make_workspace();
  Image<float> rel(h, w);
  ru.apply(wr.view(), rel.view(), rws);
  auto [ry, rx] = plane_slopes(rel);
  INFO(res.total() << " residues; LS slope ratios " << sy / ay << ", " << sx / ax << "; reliability " << ry / ay
                   << ", " << rx / ax);
  CHECK(res.total() > 100);
  CHECK(sy / ay < 0.95);
  CHECK(sx / ax < 0.95);
  CHECK(std::abs(ry / ay - 1) < 0.05);
  CHECK(std::abs(rx / ax - 1) < 0.05);
}

TEST_CASE("weighted least squares with zero weights on corrupted pixels recovers the surface elsewhere") {
  // Ghiglia & Romero 1994 [from memory]: zero weights remove the corrupted
  // differences from the fit. Outside a 20×20 patch of random phase the
  // remaining differences are exact, so the weighted solution is the true
  // surface there (up to a constant), limited only by the PCG tolerance
  // (1e-6) and float32: tolerance 2e-3 rad RMS. Unweighted least squares
  // spreads the patch's residues over the frame: its RMS error outside the
  // patch must be above 0.05 rad. Pixels within 3 of the patch are left out
  // of both figures. Measured: 148 residues; unweighted 0.94 rad, weighted
  // 1.3e-6 rad after 10 PCG iterations.
  const std::size_t h = 128, w = 144;
  const Image<float> clean = gaussian_bump_and_tilt(h, w, 30.0);
  Image<float> wr = unwrap_test::wrapped(clean);
  std::mt19937 rng(8);
  std::uniform_real_distribution<float> any(-pi_f, pi_f);
  Image<float> weights(h, w, 1.f);
  std::vector<std::uint8_t> outside(h * w, 1);
  for (std::size_t y = 0; y < h; ++y)
    for (std::size_t x = 0; x < w; ++x) {
      const bool in_patch = y >= 50 && y < 70 && x >= 60 && x < 80;
      if (in_patch) wr(y, x) = any(rng), weights(y, x) = 0.f;
      if (y + 3 >= 50 && y < 73 && x + 3 >= 60 && x < 83) outside[y * w + x] = 0;
    }
  const auto res = count_residues(wr.view());
  LeastSquaresOptions opt;
  opt.tolerance = 1e-6;
  opt.max_iterations = 300;
  LeastSquaresUnwrapper ls(h, w, opt);
  auto ws = ls.make_workspace();
  Image<float> plain(h, w), weighted(h, w);
  ls.apply(wr.view(), plain.view(), ws);
  const auto st = ls.apply(wr.view(), weights.view(), weighted.view(), ws);
  const double e_plain = rms_up_to_constant(plain, clean, &outside);
  const double e_weighted = rms_up_to_constant(weighted, clean, &outside);
  INFO(res.total() << " residues; RMS error outside the patch: unweighted " << e_plain << ", weighted " << e_weighted
                   << " after " << st.iterations << " PCG iterations (residual " << st.relative_residual << ")");
  CHECK(res.total() > 20);
  CHECK(e_plain > 0.05);
  CHECK(e_weighted < 2e-3);
  CHECK(st.converged);
  CHECK(st.iterations < 300);

  // Phase-derivative-variance weights find the patch by themselves (low
  // weights inside, high on the smooth fringes) and also beat the
  // unweighted solution outside it, by at least 2× (measured: mean weight
  // 0.20 inside, 0.996 outside; RMS error 0.055 rad against 0.94)
  // [Ghiglia & Pritt 1998, quality maps; from memory].
  Image<float> pdv(h, w);
  derivative_variance_weights(wr.view(), pdv.view());
  double in_sum = 0, in_n = 0, out_sum = 0, out_n = 0;
  for (std::size_t y = 0; y < h; ++y)
    for (std::size_t x = 0; x < w; ++x) {
      if (y >= 52 && y < 68 && x >= 62 && x < 78) in_sum += pdv(y, x), ++in_n;
      if (outside[y * w + x]) out_sum += pdv(y, x), ++out_n;
    }
  INFO("mean PDV weight inside the patch " << in_sum / in_n << ", outside " << out_sum / out_n);
  CHECK(in_sum / in_n < 0.5);
  CHECK(out_sum / out_n > 0.9);
  Image<float> with_pdv(h, w);
  ls.apply(wr.view(), pdv.view(), with_pdv.view(), ws);
  const double e_pdv = rms_up_to_constant(with_pdv, clean, &outside);
  INFO("RMS error outside with PDV weights " << e_pdv);
  CHECK(e_pdv < 0.5 * e_plain);
}

TEST_CASE("weighted least squares with uniform weights is the unweighted solution") {
  // With all weights 1 the weighted operator is the Neumann Laplacian, whose
  // exact inverse is the preconditioner, so PCG converges in one iteration to
  // the direct solution [derived].
  const std::size_t h = 90, w = 110;
  Image<float> noisy = gaussian_bump_and_tilt(h, w, 25.0);
  unwrap_test::add_noise(noisy, 0.8, 2);
  const Image<float> wr = unwrap_test::wrapped(noisy);
  LeastSquaresUnwrapper ls(h, w);
  auto ws = ls.make_workspace();
  Image<float> a(h, w), b(h, w);
  const Image<float> ones(h, w, 1.f);
  ls.apply(wr.view(), a.view(), ws);
  const auto st = ls.apply(wr.view(), ones.view(), b.view(), ws);
  INFO("iterations " << st.iterations << ", residual " << st.relative_residual);
  CHECK(st.iterations <= 2);
  CHECK(st.converged);
  CHECK(rms_up_to_constant(a, b) < 1e-5 * std::max(1.0, rms(a)));
  // Zero weights everywhere: no data, φ = 0.
  const Image<float> zeros(h, w, 0.f);
  const auto st0 = ls.apply(wr.view(), zeros.view(), b.view(), ws);
  CHECK(st0.iterations == 0);
  CHECK(rms(b) == 0.0);
}

TEST_CASE("the congruence step returns the measurement modulo 2π nearest to the estimate") {
  // Ghiglia & Pritt 1998 [from memory]: out = ψ + 2π·round((φ − ψ)/2π).
  const std::size_t h = 40, w = 50;
  Image<float> est = gaussian_bump_and_tilt(h, w, 20.0);
  Image<float> wr = unwrap_test::wrapped(est);
  unwrap_test::add_noise(est, 0.7, 1); // estimate differs from the truth
  Image<float> out(h, w);
  make_congruent(wr.view(), est.view(), out.view());
  std::size_t bad = 0;
  for (std::size_t i = 0; i < out.size(); ++i) {
    const double k = (double(out.data()[i]) - double(wr.data()[i])) / two_pi;
    bad += std::abs(k - std::round(k)) > 1e-5;
    bad += std::abs(double(out.data()[i]) - double(est.data()[i])) > pi + 1e-5;
  }
  CHECK(bad == 0);
  CHECK_THROWS_AS(make_congruent(wr.view(), est.view(), Image<float>(h, w + 1).view()), Error);
}

TEST_CASE("least-squares unwrapper: amplitude weights, options, threads and shape checks") {
  // Amplitude weights are a / max(a) clamped to [0, 1] [common practice].
  Image<float> amp(2, 3);
  const float vals[] = {0.f, 2.f, 4.f, -1.f, std::numeric_limits<float>::quiet_NaN(), 1.f};
  std::memcpy(amp.data(), vals, sizeof vals);
  Image<float> wt(2, 3);
  amplitude_weights(amp.view(), wt.view());
  CHECK(wt(0, 0) == 0.f);
  CHECK(wt(0, 1) == Approx(0.5f));
  CHECK(wt(0, 2) == 1.f);
  CHECK(wt(1, 0) == 0.f);
  CHECK(wt(1, 1) == 0.f);
  CHECK(wt(1, 2) == Approx(0.25f));
  CHECK_THROWS_AS(derivative_variance_weights(amp.view(), wt.view(), 4), Error);

  CHECK_THROWS_AS(LeastSquaresUnwrapper(0, 4), Error);
  LeastSquaresOptions bad;
  bad.tolerance = 0;
  CHECK_THROWS_AS(LeastSquaresUnwrapper(4, 4, bad), Error);
  bad = {};
  bad.max_iterations = 0;
  CHECK_THROWS_AS(LeastSquaresUnwrapper(4, 4, bad), Error);

  const std::size_t h = 100, w = 120;
  Image<float> noisy = gaussian_bump_and_tilt(h, w, 25.0);
  unwrap_test::add_noise(noisy, 0.9, 6);
  const Image<float> wr = unwrap_test::wrapped(noisy);
  Image<float> q(h, w);
  derivative_variance_weights(wr.view(), q.view());
  LeastSquaresUnwrapper ls(h, w);
  Image<float> a(h, w), b(h, w), c(h, w);
  {
    auto ws = ls.make_workspace();
    ls.apply(wr.view(), q.view(), a.view(), ws);
  }
  std::thread t1([&] {
    auto ws = ls.make_workspace();
    ls.apply(wr.view(), q.view(), b.view(), ws);
  });
  std::thread t2([&] {
    auto ws = ls.make_workspace();
    ls.apply(wr.view(), q.view(), c.view(), ws);
  });
  t1.join();
  t2.join();
  CHECK(std::memcmp(a.data(), b.data(), a.size() * sizeof(float)) == 0);
  CHECK(std::memcmp(a.data(), c.data(), a.size() * sizeof(float)) == 0);

  auto ws = ls.make_workspace();
  CHECK_THROWS_AS(ls.apply(wr.view(), Image<float>(h, w + 1).view(), ws), Error);
  LeastSquaresUnwrapper other(h + 1, w);
  auto wso = other.make_workspace();
  CHECK_THROWS_AS(ls.apply(wr.view(), a.view(), wso), Error);
}
