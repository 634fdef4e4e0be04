// Gaussian beam through ±5 Rayleigh ranges: width, radius of curvature and
// Gouy phase from the angular spectrum and the Fresnel transfer function of
// the common Propagator interface.
#include "propagate_test_util.hpp"

#include "wavestack/core/log.hpp"
#include "wavestack/propagate/propagator.hpp"

#include <catch2/catch.hpp>

#include <cmath>
#include <complex>

using namespace wavestack;
using namespace propagate_test;
using namespace wavestack::propagate;

namespace {

struct Measured {
  double w;     ///< 1/e² intensity radius from the second moment (mean of x and y)
  double R;     ///< radius of curvature from a weighted fit of the phase near the axis
  double gouy;  ///< on-axis phase minus kz, wrapped
  double axis;  ///< on-axis amplitude
};

/// Beam parameters of `u` (waist pixel (c, c), pitch d, wavenumber k, distance z).
Measured measure(const Image<cfloat>& u, std::size_t c, double d, double k, double z) {
  const std::size_t n = u.height();
  double s = 0, sxx = 0, syy = 0;
  for (std::size_t y = 0; y < n; ++y)
    for (std::size_t x = 0; x < n; ++x) {
      const double i = std::norm(std::complex<double>(u(y, x)));
      const double ry = (static_cast<double>(y) - c) * d, rx = (static_cast<double>(x) - c) * d;
      s += i;
      sxx += i * rx * rx;
      syy += i * ry * ry;
    }
  Measured m;
  // I ∝ exp(−2x²/w²) has <x²> = w²/4 per axis [derived].
  m.w = 0.5 * (2 * std::sqrt(sxx / s) + 2 * std::sqrt(syy / s));
  const std::complex<double> u0(u(c, c));
  m.axis = std::abs(u0);
  m.gouy = std::remainder(std::arg(u0) - std::remainder(k * z, 2 * M_PI), 2 * M_PI);
  // Phase relative to the axis, arg(u·conj(u0)) = k r²/(2R) + O(non-paraxial),
  // fitted as b·r² (weighted by intensity) over r < w/2, where it stays
  // below z/(4 z_R) rad — no wrapping [derived: k w²/(2R) = z/z_R].
  double num = 0, den = 0;
  const double rmax2 = m.w * m.w / 4;
  for (std::size_t y = 0; y < n; ++y)
    for (std::size_t x = 0; x < n; ++x) {
      const double ry = (static_cast<double>(y) - c) * d, rx = (static_cast<double>(x) - c) * d;
      const double r2 = rx * rx + ry * ry;
      if (r2 > rmax2 || r2 == 0) continue;
      const std::complex<double> v(u(y, x));
      const double wgt = std::norm(v);
      const double phi = std::arg(v * std::conj(u0));
      num += wgt * phi * r2;
      den += wgt * r2 * r2;
    }
  const double b = num / den; // least squares phi ≈ b r²
  m.R = k / (2 * b);
  return m;
}

} // namespace

TEST_CASE("Gaussian beam over ±5 Rayleigh ranges: w(z), R(z) and Gouy phase (angular spectrum, Fresnel TF)") {
  // Siegman, Lasers (1986) ch. 16–17; REFERENCES.md Gaussian beam
  // [confirmed; citation from memory]; exp(+ikz) field [derived]:
  //   z_R = π w0² n/λ0, w = w0 sqrt(1 + (z/z_R)²), R = z (1 + (z_R/z)²),
  //   ψ = arctan(z/z_R), U(0, z) = (w0/w) e^{i(kz − ψ)}.
  // w0 = 10 µm, λ0 = 0.6328 µm: z_R = 496.5 µm, θ0 = λ/(π w0) = 0.02 rad.
  // Grid 200² at 2 µm (w0/Δx = 5, spectrum at Nyquist ~e^-60), window 40 w0:
  // at 5 z_R, w = 51 µm and the window edge is 3.9 w away (intensity e^-31);
  // the curvature's local frequency there, r/(λR) = 0.12/µm, is below
  // Nyquist 0.25/µm. Auto padding: factor 2; at 5 z_R the critical pitch
  // λz/L_p = 1.96 µm <= 2 µm, so the transfer function is fully sampled.
  //
  // Tolerances. The Fresnel TF solves the paraxial wave equation, of which
  // the Gaussian beam is an exact solution, so it must agree to float32
  // round-off (measured <= 1e-6): 1e-5 on w, R, on-axis amplitude and ψ (rad).
  // The angular spectrum is exact and the formula paraxial; they differ by
  // O(θ0²) = 4e-4 relative [derived estimate] (measured <= 2e-4 on w, R and
  // amplitude, 5e-5 rad on ψ): tolerances 1e-3 and 3e-4 rad.
  // w, R, ψ are measured, not compared field to field: second moments of
  // the intensity, a weighted fit of the near-axis phase, the axis pixel.
  log::clear_warnings();
  const double lambda0 = 0.6328e-6, w0 = 10e-6, d = 2e-6;
  const std::size_t n = 200, c = n / 2;
  const Grid g = grid_of(d, d, lambda0);
  const double zr = M_PI * w0 * w0 / lambda0, k = g.wavenumber();
  CHECK(zr * 1e6 == Approx(496.5).margin(0.1));
  Image<cfloat> u(n, n), out(n, n);
  for (std::size_t y = 0; y < n; ++y)
    for (std::size_t x = 0; x < n; ++x) {
      const double r2 = (std::pow((double)y - c, 2) + std::pow((double)x - c, 2)) * d * d;
      u(y, x) = cfloat(static_cast<float>(std::exp(-r2 / (w0 * w0))), 0.f);
    }
  struct M {
    Method method;
    double max_frequency; // the Gaussian's band: amplitude e^{-π²w0²f²} = 5e-5 at 0.1/µm
    double tol, tol_psi; // relative on w, R, amplitude; rad on ψ
  };
  for (const M m : {M{Method::angular_spectrum, 0.0, 1e-3, 3e-4}, M{Method::fresnel, 0.1e6, 1e-5, 1e-5}}) {
    for (double zeta : {-5.0, -3.0, -2.0, -1.0, -0.5, 0.5, 1.0, 2.0, 3.0, 5.0}) {
      const double z = zeta * zr;
      INFO(method_name(m.method) << ", z = " << zeta << " z_R");
      PropagatorOptions o;
      o.method = m.method;
      o.max_frequency = m.max_frequency;
      auto p = make_propagator(n, n, g, z, o);
      CHECK_FALSE(p->choice().explicit_out_of_range); // both in range here
      auto ws = p->make_workspace();
      p->apply(u.view(), out.view(), ws);
      const Measured got = measure(out, c, d, k, z);
      const double w = w0 * std::sqrt(1 + zeta * zeta), R = z * (1 + 1 / (zeta * zeta)), psi = std::atan(zeta);
      CHECK(got.w == Approx(w).epsilon(m.tol));
      CHECK(got.R == Approx(R).epsilon(m.tol));
      CHECK(got.axis == Approx(w0 / w).epsilon(m.tol));
      CHECK(std::abs(got.gouy - (-psi)) < m.tol_psi);
    }
  }
  CHECK(log::warnings().empty());
}
