// A Gaussian waist propagated by the angular spectrum against the analytic
// Gaussian beam, in vacuum and in water.
#include "propagate_test_util.hpp"

#include "wavestack/propagate/angular_spectrum.hpp"

#include <catch2/catch.hpp>

#include <cmath>
#include <complex>

using namespace wavestack;
using namespace propagate_test;
using propagate::AngularSpectrum;

namespace {

struct Case {
  std::size_t h, w;
  double dy, dx;
  double index;
  double z_over_zr;
};

} // namespace

TEST_CASE("a Gaussian waist propagates into the analytic Gaussian beam (width, on-axis amplitude and phase)") {
  // Siegman, Lasers (1986) ch. 16-17; REFERENCES.md Gaussian beam
  // [confirmed; citation from memory] and the exp(+ikz) field [derived]:
  //   z_R = π w0² n/λ0, w(z) = w0 sqrt(1 + (z/z_R)²), ψ(z) = arctan(z/z_R),
  //   R(z) = z (1 + (z_R/z)²),
  //   U(r,z) = (w0/w) exp(-r²/w²) exp(i[kz + k r²/(2R) - ψ]),  k = 2π n/λ0.
  // The formula is paraxial, the angular spectrum exact: they differ by about
  // θ0²/4 with θ0 = λ0/(π n w0) = 0.01 here, i.e. ~3e-5 [derived estimate],
  // and float32 adds ~1e-6; the 1e-3 tolerances leave a margin of 30.
  // Sampling: w0/dx >= 5 (spectrum at Nyquist ~e^-60), window >= 470 µm so
  // even w(2 z_R) = 45 µm is 10 w from the edge, default 2x padding.
  const double lambda0 = 0.6328e-6, w0 = 20e-6;
  const Case cases[] = {
      {128, 128, 4e-6, 4e-6, 1.0, 0.5},   {128, 128, 4e-6, 4e-6, 1.0, 1.0},
      {128, 128, 4e-6, 4e-6, 1.0, 2.0},   {128, 128, 4e-6, 4e-6, 1.0, -1.0},
      {121, 135, 4e-6, 3.5e-6, 1.333, 1.0}, {121, 135, 4e-6, 3.5e-6, 1.333, -1.5},
      {128, 128, 4e-6, 4e-6, 1.333, 2.0}};
  for (const Case& c : cases) {
    const double zr = M_PI * w0 * w0 * c.index / lambda0;
    const double z = c.z_over_zr * zr;
    INFO("shape " << c.h << "x" << c.w << ", n = " << c.index << ", z = " << c.z_over_zr << " z_R");
    Grid g;
    g.dy = c.dy;
    g.dx = c.dx;
    g.wavelength = lambda0;
    g.medium_index = c.index;
    const double k = g.wavenumber();
    const std::size_t cy = c.h / 2, cx = c.w / 2; // waist on a sample
    Image<cfloat> u(c.h, c.w);
    for (std::size_t y = 0; y < c.h; ++y)
      for (std::size_t x = 0; x < c.w; ++x) {
        const double ry = (static_cast<double>(y) - cy) * c.dy, rx = (static_cast<double>(x) - cx) * c.dx;
        u(y, x) = cfloat(static_cast<float>(std::exp(-(rx * rx + ry * ry) / (w0 * w0))), 0.0f);
      }
    AngularSpectrum as(c.h, c.w, g, z);
    auto ws = as.make_workspace();
    Image<cfloat> out(c.h, c.w);
    as.apply(u.view(), out.view(), ws);

    const double wz = w0 * std::sqrt(1 + std::pow(z / zr, 2));
    const double psi = std::atan(z / zr);
    const double R = z * (1 + std::pow(zr / z, 2));

    // Beam width from the second moment of the intensity: for
    // I ∝ exp(-2x²/w²), <x²> = w²/4, so w = 2 sqrt(<x²>) per axis [derived].
    double s = 0, sx = 0, sy = 0;
    for (std::size_t y = 0; y < c.h; ++y)
      for (std::size_t x = 0; x < c.w; ++x) {
        const double i = std::norm(std::complex<double>(out(y, x)));
        const double ry = (static_cast<double>(y) - cy) * c.dy, rx = (static_cast<double>(x) - cx) * c.dx;
        s += i;
        sx += i * rx * rx;
        sy += i * ry * ry;
      }
    CHECK(2 * std::sqrt(sx / s) == Approx(wz).epsilon(1e-3));
    CHECK(2 * std::sqrt(sy / s) == Approx(wz).epsilon(1e-3));

    // On axis: amplitude w0/w, phase kz - ψ. kz is ~1e4–1e5 rad, so the
    // expected phase is formed and wrapped in double; the check is relative
    // to the Gouy phase, the only non-trivial part of it.
    const std::complex<double> axis(out(cy, cx));
    CHECK(std::abs(axis) == Approx(w0 / wz).epsilon(1e-3));
    const double dphi = std::remainder(std::arg(axis) - (k * z - psi), 2 * M_PI);
    CHECK(std::abs(dphi) < 1e-3 * std::abs(psi));

    // The whole field, curvature included.
    Image<cfloat> expect(c.h, c.w);
    for (std::size_t y = 0; y < c.h; ++y)
      for (std::size_t x = 0; x < c.w; ++x) {
        const double ry = (static_cast<double>(y) - cy) * c.dy, rx = (static_cast<double>(x) - cx) * c.dx;
        const double r2 = rx * rx + ry * ry;
        const double phase = std::remainder(k * z, 2 * M_PI) + k * r2 / (2 * R) - psi;
        expect(y, x) = cfloat(std::polar(w0 / wz * std::exp(-r2 / (wz * wz)), phase));
      }
    CHECK(rel_rms(out.view(), expect.view()) < 1e-3);
  }
}
