// Talbot self-imaging of a sinusoidal grating: paraxial revival distance for
// the Fresnel transfer function, non-paraxial one for the exact angular
// spectrum.
#include "propagate_test_util.hpp"

#include "wavestack/propagate/propagator.hpp"

#include <catch2/catch.hpp>

#include <cmath>
#include <complex>

using namespace wavestack;
using namespace propagate_test;
using namespace wavestack::propagate;

namespace {

constexpr double lambda = 0.6328e-6;

double talbot_paraxial(double p) { return 2 * p * p / lambda; }
double talbot_exact(double p) { return lambda / (1 - std::sqrt(1 - lambda * lambda / (p * p))); }

/// Grating t(x) = 1 + 0.5 cos(2πx/p) + 0.3 i sin(2πx/p): orders 0, ±1 only,
/// the two side orders of different weight so a mirrored or shifted image fails.
Image<cfloat> grating(std::size_t h, std::size_t w, double dx, double p, double shift = 0) {
  Image<cfloat> u(h, w);
  for (std::size_t y = 0; y < h; ++y)
    for (std::size_t x = 0; x < w; ++x) {
      const double t = 2 * M_PI * (static_cast<double>(x) * dx - shift) / p;
      u(y, x) = cfloat(static_cast<float>(1 + 0.5 * std::cos(t)), static_cast<float>(0.3 * std::sin(t)));
    }
  return u;
}

/// Phase of order +1 (or −1) relative to order 0 along row 0, from the DFT
/// bins of the period (the window holds an integer number of periods).
double order_phase(const Image<cfloat>& u, std::size_t bin, int sign) {
  const std::size_t w = u.width();
  std::complex<double> c0 = 0, c1 = 0;
  for (std::size_t x = 0; x < w; ++x) {
    const std::complex<double> v(u(0, x));
    c0 += v;
    c1 += v * std::polar(1.0, -sign * 2 * M_PI * static_cast<double>(bin * x) / static_cast<double>(w));
  }
  return std::arg(c1 / c0);
}

Image<cfloat> times_phase(const Image<cfloat>& u, double phase) {
  Image<cfloat> v = u;
  const cfloat e(static_cast<float>(std::cos(phase)), static_cast<float>(std::sin(phase)));
  for (auto& x : v) x *= e;
  return v;
}

} // namespace

TEST_CASE("Talbot lengths reproduce the REFERENCES.md table") {
  // REFERENCES.md Talbot self-imaging [confirmed; citation from memory]:
  // paraxial 2p²/λ (Rayleigh 1881), non-paraxial λ/(1 − sqrt(1 − λ²/p²));
  // table values [derived] at λ = 0.6328 µm, printed to 0.1 nm.
  CHECK(talbot_paraxial(5e-6) * 1e6 == Approx(79.0139).margin(1e-4));
  CHECK(talbot_exact(5e-6) * 1e6 == Approx(78.6962).margin(1e-4));
  CHECK(talbot_paraxial(10e-6) * 1e6 == Approx(316.0556).margin(1e-4));
  CHECK(talbot_exact(10e-6) * 1e6 == Approx(315.7389).margin(1e-4));
  CHECK(talbot_paraxial(20e-6) * 1e6 == Approx(1264.2225).margin(1e-4));
  CHECK(talbot_exact(20e-6) * 1e6 == Approx(1263.9060).margin(1e-4));
  // ≈ 2p²/λ − λ/2 [derived]: 0.32 µm apart for p = 5 µm.
  CHECK((talbot_paraxial(5e-6) - talbot_exact(5e-6)) * 1e6 == Approx(0.3177).margin(1e-4));
}

TEST_CASE("a sinusoidal grating revives at the paraxial Talbot length (Fresnel TF) and the exact one (angular spectrum)") {
  // Period p = 5 µm at 0.6328 µm (sinθ = λ/p = 0.127), 16 samples per
  // period, 16 periods across: the field is periodic in the window, so no
  // padding (a circular propagation is then exact) and the orders sit on
  // FFT bins 0, ±16. Revival conditions [derived]: Fresnel TF phase of
  // order ±1 is −πλz/p² = −2π at z = 2p²/λ; exact phase 2πz sqrt(1/λ² − 1/p²)
  // = kz − 2π at z = λ/(1 − sqrt(1 − λ²/p²)). Both revive to e^{ikz}·t.
  // Half-period shift at z_T/2 [from memory, REFERENCES.md].
  // Tolerance 1e-5 (relative RMS): float32 transfer function and FFTs.
  // The Fresnel TF is given the grating's band (max_frequency 1.01/p), so
  // its paraxial phase error is the true 0.026 rad of the ±1 orders, within
  // the default 0.1 rad, not that of the empty grid Nyquist band.
  const double p = 5e-6, dx = p / 16;
  const std::size_t h = 128, w = 256, bin = 16; // 128 rows: a 40 µm window keeps the y axis in range too
  const Grid g = grid_of(dx, dx, lambda);
  const double k = g.wavenumber();
  const Image<cfloat> t = grating(h, w, dx, p);

  auto run = [&](Method m, double z) {
    PropagatorOptions o;
    o.method = m;
    o.padding = Padding::none();
    o.max_frequency = 1.01 / p;
    auto prop = make_propagator(h, w, g, z, o);
    REQUIRE(prop->padded_width() == w);
    CHECK_FALSE(prop->choice().explicit_out_of_range);
    auto ws = prop->make_workspace();
    Image<cfloat> out(h, w);
    prop->apply(t.view(), out.view(), ws);
    return out;
  };

  const double zp = talbot_paraxial(p), ze = talbot_exact(p);
  SECTION("Fresnel TF at 2p²/λ and its half-period image at p²/λ") {
    CHECK(rel_rms(run(Method::fresnel, zp).view(), times_phase(t, k * zp).view()) < 1e-5);
    const Image<cfloat> half = grating(h, w, dx, p, p / 2);
    CHECK(rel_rms(run(Method::fresnel, zp / 2).view(), times_phase(half, k * zp / 2).view()) < 1e-5);
    // and it is not a trivial identity: at z_T/4 the field differs.
    CHECK(rel_rms(run(Method::fresnel, zp / 4).view(), times_phase(t, k * zp / 4).view()) > 0.1);
  }
  SECTION("exact angular spectrum at λ/(1 − sqrt(1 − λ²/p²))") {
    CHECK(rel_rms(run(Method::angular_spectrum, ze).view(), times_phase(t, k * ze).view()) < 1e-5);
  }
  SECTION("the exact angular spectrum does not revive at the paraxial length") {
    // At z = 2p²/λ the ±1 orders are off by 2πz (sqrt(1/λ² − 1/p²) − 1/λ) + 2π
    // = −0.0256 rad [derived] relative to order 0: measured from the DFT bins.
    const double expect = std::remainder(2 * M_PI * zp * (std::sqrt(1 / (lambda * lambda) - 1 / (p * p)) - 1 / lambda),
                                         2 * M_PI);
    CHECK(expect == Approx(-0.0256).margin(5e-4));
    const Image<cfloat> out = run(Method::angular_spectrum, zp);
    for (int s : {+1, -1}) {
      const double got = std::remainder(order_phase(out, bin, s) - order_phase(t, bin, s), 2 * M_PI);
      // float32 FFT phase noise ~1e-6 rad; 1e-4 leaves a margin and is 250x
      // smaller than the effect.
      CHECK(got == Approx(expect).margin(1e-4));
    }
    CHECK(rel_rms(out.view(), times_phase(t, k * zp).view()) > 1e-3); // no revival
    // The Fresnel TF at the same distance revives: its ±1 phase is 0.
    const Image<cfloat> fr = run(Method::fresnel, zp);
    CHECK(std::abs(std::remainder(order_phase(fr, bin, 1) - order_phase(t, bin, 1), 2 * M_PI)) < 1e-5);
  }
}
