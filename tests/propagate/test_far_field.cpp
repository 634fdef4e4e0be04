// Far field: the Airy pattern of a circular aperture (single-FFT Fresnel;
// angular spectrum in the focal plane of a lens), and the orientation of the
// single-FFT output grid for both signs of z.
#include "propagate_test_util.hpp"

#include "wavestack/propagate/propagator.hpp"

#include <catch2/catch.hpp>

#include <cmath>
#include <complex>
#include <vector>

using namespace wavestack;
using namespace propagate_test;
using namespace wavestack::propagate;

namespace {

constexpr double lambda = 0.6328e-6;

/// Disc of radius `a` centred on pixel (n/2, n/2), each pixel weighted by its
/// covered area (16×16 sub-samples), so the sampled edge is not a staircase.
Image<cfloat> disc(std::size_t n, double d, double a) {
  Image<cfloat> u(n, n);
  const int sub = 16;
  for (std::size_t y = 0; y < n; ++y)
    for (std::size_t x = 0; x < n; ++x) {
      int in = 0;
      for (int sy = 0; sy < sub; ++sy)
        for (int sx = 0; sx < sub; ++sx) {
          const double py = (static_cast<double>(y) - n / 2 + (sy + 0.5) / sub - 0.5) * d;
          const double px = (static_cast<double>(x) - n / 2 + (sx + 0.5) / sub - 0.5) * d;
          in += px * px + py * py <= a * a;
        }
      u(y, x) = cfloat(static_cast<float>(in) / (sub * sub), 0.0f);
    }
  return u;
}

/// Radius (in pixels from pixel (c, c), along direction (sy, sx)) of the
/// first zero of the field near `guess`. The field is made real first:
/// times e^{−iπr²/(λL)} (the far-field curvature, L = z or the focal length,
/// pitch `d`) and the conjugate phase of the centre; its real part changes
/// sign at the dark ring, located by the cubic through the 4 samples around
/// the sign change (bisection on the interpolant). A parabola through the
/// intensity minimum would be biased by 1.5e-3 at ~20 px per ring (its
/// cubic term [derived numerically]).
double dark_ring(const Image<cfloat>& u, std::size_t c, int sy, int sx, double guess, double d, double lambda_l) {
  const std::complex<double> u0(u(c, c));
  const std::complex<double> norm = std::conj(u0) / std::abs(u0);
  auto G = [&](long r) {
    const double rr = static_cast<double>(r) * d;
    return (std::complex<double>(u(c + sy * r, c + sx * r)) * norm * std::polar(1.0, -M_PI * rr * rr / lambda_l)).real();
  };
  long m = static_cast<long>(0.7 * guess);
  while (!(G(m) > 0 && G(m + 1) <= 0) && m < static_cast<long>(1.3 * guess)) ++m;
  REQUIRE(m < static_cast<long>(1.3 * guess));
  const double xs[4] = {double(m - 1), double(m), double(m + 1), double(m + 2)};
  const double ys[4] = {G(m - 1), G(m), G(m + 1), G(m + 2)};
  auto cubic = [&](double t) {
    double s = 0;
    for (int i = 0; i < 4; ++i) {
      double l = ys[i];
      for (int j = 0; j < 4; ++j)
        if (j != i) l *= (t - xs[j]) / (xs[i] - xs[j]);
      s += l;
    }
    return s;
  };
  double lo = double(m), hi = double(m + 1);
  for (int it = 0; it < 60; ++it) {
    const double mid = 0.5 * (lo + hi);
    (cubic(mid) > 0 ? lo : hi) = mid;
  }
  return 0.5 * (lo + hi);
}

/// First zero of J1 and the Airy intensity [2J1(v)/v]² at v = step·i,
/// i = 0..count-1, from scipy (tests/propagate/reference_analytic.py).
std::vector<double> airy_reference(std::size_t count, double step, const std::string& tag) {
  TempFiles tmp{{temp_path("airy_" + tag)}};
  REQUIRE(run_analytic("airy " + shell_quoted(tmp.paths[0]) + " " + std::to_string(count) + " " +
                       num17(step * static_cast<double>(count - 1))) == 0);
  auto v = read_raw<double>(tmp.paths[0], count + 1);
  REQUIRE(v.size() == count + 1);
  return v;
}

} // namespace

TEST_CASE("far field of a circular aperture by single-FFT Fresnel: first dark ring at 1.22 λz/D") {
  // Airy: first zero at sinθ = (j1,1/π) λ/D, j1,1 = 3.8317 (first zero of J1,
  // scipy.special.jn_zeros), so r = 1.21967 λz/D in the far field
  // (REFERENCES.md Airy pattern [confirmed; citation from memory]; Born & Wolf
  // Sec. 8.5). Intensity [2J1(v)/v]², v = πDr/(λz).
  // Set-up: D = 640 µm sampled at 5 µm (64 px radius, area-weighted edge) in a
  // 256² window; z = 8.09 m gives N_F = (D/2)²/(λz) = 0.02, well inside the
  // Fraunhofer region N_F < 1/8 (REFERENCES.md [derived]). Padding 8 (single-
  // FFT padding only interpolates the output): P = 2048, output pitch
  // λz/(PΔx) = 0.5 mm, ring at 19.5 px. The method is left to `auto`, told
  // the field's useful band (max_frequency 8/D, out to the 8th ring), and must
  // pick single-FFT Fresnel.
  // Tolerances: the residual Fresnel phase πN_F = 0.06 rad over the aperture
  // (a defocus of N_F/2 = 0.01 waves) moves the zero by O(N_F²); the
  // area-weighted edge leaves an effective diameter error ~1e-4; the cubic
  // interpolation of the zero is good to ~1e-5 (numpy check): 1e-3 on the
  // ring radius.
  // Profile: 2e-3 of the peak (float32, edge sampling, N_F).
  const std::size_t n = 256;
  const double d = 5e-6, a = 320e-6, D = 2 * a, nf = 0.02;
  const double z = a * a / (lambda * nf);
  const Grid g = grid_of(d, d, lambda);
  PropagatorOptions o;
  o.padding = Padding::of(8);
  o.max_frequency = 8 / D;
  auto p = make_propagator(n, n, g, z, o);
  REQUIRE(p->method() == Method::fresnel_single_fft);
  CHECK_FALSE(p->choice().auto_out_of_range);
  const std::size_t P = p->out_width();
  REQUIRE(P == 2048);
  REQUIRE(p->out_height() == 2048);
  const double d2 = lambda * z / (P * d);
  CHECK(p->output_grid().dx == Approx(d2).epsilon(1e-14));
  CHECK(p->output_grid().dy == Approx(d2).epsilon(1e-14));
  CHECK(p->output_grid().plane == z);
  const Image<cfloat> u = disc(n, d, a);
  auto ws = p->make_workspace();
  Image<cfloat> out(P, P);
  p->apply(u.view(), out.view(), ws);

  const std::size_t count = 64;
  const double vstep = M_PI * D * d2 / (lambda * z); // v per output pixel
  const auto ref = airy_reference(count, vstep, "ffft");
  const double j11 = ref[0];
  CHECK(j11 == Approx(3.8317059702).epsilon(1e-10)); // REFERENCES.md [derived]
  const double r1 = j11 / M_PI * lambda * z / D;
  CHECK(r1 / (lambda * z / D) == Approx(1.2196698913).epsilon(1e-9));
  const std::size_t c = P / 2;
  for (auto [sy, sx] : {std::pair{0, 1}, std::pair{0, -1}, std::pair{1, 0}, std::pair{-1, 0}}) {
    const double got = dark_ring(out, c, sy, sx, r1 / d2, d2, lambda * z) * d2;
    INFO("direction " << sy << "," << sx << ": ring at " << got << " m, expected " << r1);
    CHECK(got == Approx(r1).epsilon(1e-3));
  }
  const double i0 = std::norm(std::complex<double>(out(c, c)));
  double worst = 0;
  for (std::size_t m = 0; m < count; ++m)
    worst = std::max(worst, std::abs(std::norm(std::complex<double>(out(c, c + m))) / i0 - ref[1 + m]));
  INFO("largest profile difference " << worst);
  CHECK(worst < 2e-3);
  // Peak value: |U(0)|² = (πa²/(λz))² for a unit plane wave (Fraunhofer,
  // Goodman ch. 4 [from memory]) = (π N_F)².
  CHECK(i0 == Approx(std::pow(M_PI * nf, 2)).epsilon(2e-3));
}

TEST_CASE("Airy pattern in the focal plane of a lens by the angular spectrum") {
  // The focal plane of a lens is the far field of its aperture: a converging
  // spherical wave e^{−ik(sqrt(r² + f²) − f)} over a disc of diameter D gives
  // the Airy pattern at z = f with its first zero at 1.21967 λf/D
  // (REFERENCES.md Airy pattern [confirmed; citation from memory]). D = 100 µm,
  // f = 2 mm (NA 0.025: the non-paraxial shift of the zero is O(NA²) = 6e-4),
  // 0.5 µm pitch, 256² window, auto padding (2 + 4 sqrt(λf)/L = 3.1x: at
  // 2x the soft edge of the band limit moves the ring by 1.9e-3). The angular spectrum is
  // beyond its critical distance here (it warns: the band limit keeps ~10%
  // of the bandwidth), but the converging wave lies inside the kept band, so
  // the result is exact in the window. Ring tolerance 5e-4 (O(NA²) = 6e-4
  // non-paraxial shift times a small coefficient; measured ~1e-4), profile
  // 2e-3 of the peak.
  log::clear_warnings();
  const std::size_t n = 256, c = n / 2;
  const double d = 0.5e-6, a = 50e-6, D = 2 * a, f = 2e-3;
  const Grid g = grid_of(d, d, lambda);
  const double k = g.wavenumber();
  Image<cfloat> u = disc(n, d, a);
  for (std::size_t y = 0; y < n; ++y)
    for (std::size_t x = 0; x < n; ++x) {
      const double r2 = (std::pow((double)y - c, 2) + std::pow((double)x - c, 2)) * d * d;
      // k(sqrt(r²+f²) − f) = k r²/(sqrt(r²+f²) + f): no cancellation.
      const double ph = -k * r2 / (std::sqrt(r2 + f * f) + f);
      u(y, x) *= cfloat(static_cast<float>(std::cos(ph)), static_cast<float>(std::sin(ph)));
    }
  PropagatorOptions o;
  o.method = Method::angular_spectrum;
  auto p = make_propagator(n, n, g, f, o);
  CHECK(p->choice().explicit_out_of_range);
  CHECK(warned("angular spectrum (requested) beyond its sampling range"));
  // The converging wave's highest frequency a/(λf) is inside the band limit.
  CHECK(a / (lambda * f) < p->choice().bandwidth_kept / (2 * d));
  auto ws = p->make_workspace();
  Image<cfloat> out(n, n);
  p->apply(u.view(), out.view(), ws);

  const std::size_t count = 64;
  const auto ref = airy_reference(count, M_PI * D * d / (lambda * f), "lens");
  const double r1 = ref[0] / M_PI * lambda * f / D;
  for (auto [sy, sx] : {std::pair{0, 1}, std::pair{0, -1}, std::pair{1, 0}, std::pair{-1, 0}}) {
    const double got = dark_ring(out, c, sy, sx, r1 / d, d, lambda * f) * d;
    INFO("direction " << sy << "," << sx << ": ring at " << got << " m, expected " << r1);
    CHECK(got == Approx(r1).epsilon(5e-4));
  }
  const double i0 = std::norm(std::complex<double>(out(c, c)));
  double worst = 0;
  for (std::size_t m = 0; m < count; ++m)
    worst = std::max(worst, std::abs(std::norm(std::complex<double>(out(c, c + m))) / i0 - ref[1 + m]));
  INFO("largest profile difference " << worst);
  CHECK(worst < 2e-3);
}

TEST_CASE("single-FFT Fresnel keeps the axes' orientation for z > 0 and z < 0") {
  // A tilted beam's centroid moves by <x>(z) = <x>(0) + λz<fx> under Fresnel
  // propagation (the paraxial transfer function only changes phases in the
  // spectrum, and d<x>/dz = λ<fx> [derived]). Gaussian w = 100 µm with tilt
  // fx = 0.01/µm, fy = −0.006/µm (different, so a transposed grid fails), at
  // z = ±1 m: centroid at λz(fx, fy) = (±6.33, ∓3.80) mm, i.e. on the side the
  // tilt points to for z > 0 and the opposite side for z < 0, on an output
  // grid of positive pitch λ|z|/(NΔx) = 0.494 mm. A mirrored grid would put
  // it on the wrong side. Tolerance 1e-3 of the displacement (sampling of
  // the 4 px wide spot is exact for the centroid of a Gaussian; float32).
  const std::size_t n = 256, c = n / 2;
  const double d = 5e-6, w0 = 100e-6, fx = 0.01e6, fy = -0.006e6;
  const Grid g = grid_of(d, d, lambda);
  Image<cfloat> u(n, n);
  for (std::size_t y = 0; y < n; ++y)
    for (std::size_t x = 0; x < n; ++x) {
      const double ry = ((double)y - c) * d, rx = ((double)x - c) * d;
      u(y, x) = cfloat(std::polar(std::exp(-(rx * rx + ry * ry) / (w0 * w0)), 2 * M_PI * (fx * rx + fy * ry)));
    }
  for (double z : {1.0, -1.0}) {
    INFO("z = " << z);
    PropagatorOptions o;
    o.method = Method::fresnel_single_fft;
    o.padding = Padding::none();
    // The beam's band: |f − f0| < 3/(π w0) = 0.0095/µm around 0.012/µm; up to
    // 0.025/µm the paraxial phase error is 0.08 rad, in range.
    o.max_frequency = 0.025e6;
    auto p = make_propagator(n, n, g, z, o);
    CHECK_FALSE(p->choice().explicit_out_of_range);
    const double d2 = p->output_grid().dx;
    CHECK(d2 == Approx(lambda * 1.0 / (n * d)).epsilon(1e-14));
    CHECK(d2 > 0);
    CHECK(p->output_grid().plane == z);
    auto ws = p->make_workspace();
    Image<cfloat> out(n, n);
    p->apply(u.view(), out.view(), ws);
    double s = 0, sx = 0, sy = 0;
    for (std::size_t y = 0; y < n; ++y)
      for (std::size_t x = 0; x < n; ++x) {
        const double i = std::norm(std::complex<double>(out(y, x)));
        s += i;
        sx += i * ((double)x - c) * d2;
        sy += i * ((double)y - c) * d2;
      }
    CHECK(sx / s == Approx(lambda * z * fx).epsilon(1e-3));
    CHECK(sy / s == Approx(lambda * z * fy).epsilon(1e-3));
  }
}
