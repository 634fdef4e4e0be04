// Physics of the band-limited angular spectrum: transfer function, band
// limit, evanescent waves, round trip and energy conservation.
#include "propagate_test_util.hpp"

#include "wavestack/core/error.hpp"
#include "wavestack/propagate/angular_spectrum.hpp"

#include <catch2/catch.hpp>

#include <cmath>
#include <cstring>
#include <utility>
#include <vector>

using namespace wavestack;
using namespace propagate_test;
using propagate::AngularSpectrum;
using propagate::AngularSpectrumOptions;

namespace {

Grid make_grid(double dy, double dx, double wavelength, double index = 1.0) {
  Grid g;
  g.dy = dy;
  g.dx = dx;
  g.wavelength = wavelength;
  g.medium_index = index;
  return g;
}

constexpr double hene = 0.6328e-6; // He-Ne wavelength used in REFERENCES.md examples

// Shapes whose good_size is themselves, so pad_factor = 1 means no padding:
// even, odd and odd-rectangular (STYLE.md).
const std::vector<std::pair<std::size_t, std::size_t>> exact_shapes = {{64, 64}, {45, 81}, {35, 49}};

/// Band-pass the periodic h×w field `u` to |fx| <= ux, |fy| <= uy (test-side
/// reference for what a round trip must leave).
Image<cfloat> band_pass(const Image<cfloat>& u, double dy, double dx, double uy, double ux) {
  const std::size_t h = u.height(), w = u.width();
  Image<cfloat> spec(h, w), out(h, w);
  fft::plan_c2c(h, w, fft::Direction::forward)->execute(u.data(), spec.data());
  const float n = 1.0f / static_cast<float>(h * w);
  for (std::size_t ky = 0; ky < h; ++ky)
    for (std::size_t kx = 0; kx < w; ++kx) {
      const bool keep = std::abs(fft::bin_frequency(ky, h, dy)) <= uy && std::abs(fft::bin_frequency(kx, w, dx)) <= ux;
      spec(ky, kx) = keep ? spec(ky, kx) * n : cfloat(0, 0);
    }
  fft::plan_c2c(h, w, fft::Direction::backward)->execute(spec.data(), out.data());
  return out;
}

} // namespace

TEST_CASE("the transfer function is exp(i 2π z sqrt((n/λ0)^2 - fx^2 - fy^2))/N inside the band and 0 outside") {
  // Exact angular-spectrum transfer function (Goodman, Introduction to Fourier
  // Optics, 3rd ed. (2005), ch. 3; REFERENCES.md Propagation [from memory]),
  // evanescent part set to 0 and Matsushima–Shimobaba rect band limit
  // (Opt. Express 17(22), 19662 (2009) [from memory]); evaluated here
  // independently in long double. Grid chosen so both cuts are active:
  // Nyquist 1/(2·0.3 µm) = 1.67/µm, n/λ0 = 2.11/µm (corners evanescent),
  // u_limit ≈ 0.7/µm (padded) and 0.2/µm (unpadded).
  // Even padded sizes (96x120) and odd ones (45x35, pad_factor 1) — the
  // implementation mirrors bins k and n-k, which differs for odd n.
  const Grid g = make_grid(0.3e-6, 0.3e-6, hene, 1.333);
  const double z = 50e-6;
  struct Shape {
    std::size_t h, w;
    double pad;
  };
  for (const Shape sh : {Shape{48, 60, 2.0}, Shape{45, 35, 1.0}}) {
    INFO("shape " << sh.h << "x" << sh.w << ", pad " << sh.pad);
    AngularSpectrumOptions opt;
    opt.pad_factor = sh.pad;
    AngularSpectrum as(sh.h, sh.w, g, z, opt);
    const std::size_t ph = as.padded_height(), pw = as.padded_width();
    CHECK(ph == fft::good_size(static_cast<std::size_t>(sh.pad * sh.h)));
    CHECK(pw == fft::good_size(static_cast<std::size_t>(sh.pad * sh.w)));
    const long double lam = static_cast<long double>(hene) / 1.333L;
    const long double n = static_cast<long double>(ph * pw);
    std::size_t kept = 0, evanescent = 0, cut = 0;
    for (std::size_t ky = 0; ky < ph; ++ky)
      for (std::size_t kx = 0; kx < pw; ++kx) {
        const long double fy = static_cast<long double>(fft::signed_bin(ky, ph)) / (ph * 0.3e-6L);
        const long double fx = static_cast<long double>(fft::signed_bin(kx, pw)) / (pw * 0.3e-6L);
        const long double a = 1.0L / (lam * lam) - fx * fx - fy * fy;
        const long double ux = 1.0L / (lam * std::sqrt(std::pow(2.0L * z / (pw * 0.3e-6L), 2) + 1.0L));
        const long double uy = 1.0L / (lam * std::sqrt(std::pow(2.0L * z / (ph * 0.3e-6L), 2) + 1.0L));
        const std::complex<double> got(as.transfer()(ky, kx));
        if (a < 0) {
          ++evanescent;
          CHECK(got == std::complex<double>(0, 0));
        } else if (std::abs(fx) > ux || std::abs(fy) > uy) {
          ++cut;
          CHECK(got == std::complex<double>(0, 0));
        } else {
          ++kept;
          const long double phase = 2.0L * M_PIl * static_cast<long double>(z) * std::sqrt(a);
          const std::complex<double> expect(static_cast<double>(std::cos(phase) / n),
                                            static_cast<double>(std::sin(phase) / n));
          // float32 rounding of a unit phasor (2^-24 per component) times 1/N.
          CHECK(std::abs(got - expect) < 2e-7 / static_cast<double>(n));
        }
      }
    CHECK(kept > 0);
    CHECK(evanescent > 0);
    CHECK(cut > 0);
  }
}

TEST_CASE("band limit reproduces the REFERENCES.md example and activates at 19.18 mm") {
  // REFERENCES.md Sampling criteria [from memory; derived]: λ = 0.6328 µm,
  // N = 512, Δx = 3.45 µm, S = NΔx = 1766.4 µm, zero-padded to 2N so
  // Δu = 1/(2S): u_limit = 1/(λ sqrt((2Δu z)^2 + 1)) = 1/(λ sqrt((z/S)^2 + 1)).
  const double dx = 3.45e-6, S = 512 * dx;
  const Grid g = make_grid(dx, dx, hene);
  AngularSpectrum at10(512, 512, g, 10e-3);
  REQUIRE(at10.padded_width() == 1024); // 2N, so Δu = 1/(2S) as in the example
  const double expect10 = 1.0 / (hene * std::sqrt(std::pow(10e-3 / S, 2) + 1.0));
  CHECK(at10.band_limit_fx() == Approx(expect10).epsilon(1e-12));
  CHECK(at10.band_limit_fy() == Approx(expect10).epsilon(1e-12));
  // Printed value 0.27488 /µm (5 figures, so 3e-5 relative) and the limit is
  // then inactive: above the grid's Nyquist frequency 0.14493 /µm.
  CHECK(at10.band_limit_fx() * 1e-6 == Approx(0.27488).epsilon(3e-5));
  const double nyquist = 1.0 / (2.0 * dx);
  CHECK(nyquist * 1e-6 == Approx(0.14493).epsilon(3e-5));
  CHECK(at10.band_limit_fx() > nyquist);

  // Activation: u_limit < 1/(2Δx) ⇔ z > S sqrt((2Δx/λ)^2 − 1) = 19.18 mm
  // (REFERENCES.md [derived]); the approximation 2NΔx²/λ gives 19.26 mm.
  const double z_on = S * std::sqrt(std::pow(2.0 * dx / hene, 2) - 1.0);
  CHECK(z_on * 1e3 == Approx(19.18).margin(0.005));
  CHECK(2 * 512 * dx * dx / hene * 1e3 == Approx(19.26).margin(0.005));
  AngularSpectrum before(512, 512, g, 19.17e-3), after(512, 512, g, 19.19e-3);
  CHECK(before.band_limit_fx() > nyquist);
  CHECK(after.band_limit_fx() < nyquist);
  // Observable effect on bin pw/2, which holds fx = -1/(2Δx) (the Nyquist
  // bin, numpy fftfreq layout), fy = 0: kept before, removed after.
  CHECK(std::abs(before.transfer()(0, 512)) > 0.0f);
  CHECK(std::abs(after.transfer()(0, 512)) == 0.0f);
  CHECK(std::abs(after.transfer()(0, 511)) > 0.0f); // fx just below Nyquist: still inside

  // Each axis uses its own frequency step: Δfy = 1/(ph·dy).
  const Grid g2 = make_grid(2e-6, dx, hene);
  AngularSpectrum rect(300, 512, g2, 10e-3);
  const double dfy = 1.0 / (static_cast<double>(rect.padded_height()) * 2e-6);
  CHECK(rect.band_limit_fy() == Approx(1.0 / (hene * std::sqrt(std::pow(2 * dfy * 10e-3, 2) + 1))).epsilon(1e-12));

  // In a medium the wavelength is λ0/n (DESIGN.md physical model).
  const Grid gw = make_grid(dx, dx, hene, 1.333);
  AngularSpectrum water(512, 512, gw, 10e-3);
  CHECK(water.band_limit_fx() == Approx(1.0 / (hene / 1.333 * std::sqrt(std::pow(10e-3 / S, 2) + 1.0))).epsilon(1e-12));

  AngularSpectrumOptions off;
  off.band_limit = false;
  AngularSpectrum unlimited(512, 512, g, 30e-3, off);
  CHECK(std::isinf(unlimited.band_limit_fx()));
  CHECK(std::abs(unlimited.transfer()(0, 512)) > 0.0f);
}

TEST_CASE("evanescent components are removed, and propagate in a denser medium") {
  // dx = 0.2 µm: the grid reaches 2.5/µm, beyond 1/λ0 = 1.58/µm. Plane waves
  // on exact bins of an unpadded 64×64 grid: bin 5 (0.39/µm, propagating)
  // and bin 25 (1.95/µm, evanescent in vacuum, propagating in water where
  // n/λ0 = 2.11/µm). REFERENCES.md Propagation [from memory]: evanescent
  // part H = exp(-2πz sqrt(f^2 - 1/λ^2)) would decay for z > 0 (to 0.03 at
  // z = 0.5 µm) and grow for z < 0; we set it to 0 for either sign.
  const std::size_t n = 64;
  const double dx = 0.2e-6;
  const double fp = 5 / (n * dx), fe = 25 / (n * dx);
  Image<cfloat> u(n, n);
  for (std::size_t y = 0; y < n; ++y)
    for (std::size_t x = 0; x < n; ++x) {
      const double px = 2 * M_PI * fp * x * dx, ex = 2 * M_PI * fe * x * dx, ey = 2 * M_PI * fe * y * dx;
      u(y, x) = cfloat(std::polar(1.0, px) + 0.5 * std::polar(1.0, ex) + 0.5 * std::polar(1.0, ey));
    }
  AngularSpectrumOptions opt;
  opt.pad_factor = 1.0;
  for (bool limit : {false, true}) {
    opt.band_limit = limit;
    for (double z : {0.5e-6, -0.5e-6}) {
      INFO("z = " << z << ", band limit " << limit);
      AngularSpectrum as(n, n, make_grid(dx, dx, hene), z, opt);
      auto ws = as.make_workspace();
      Image<cfloat> out(n, n);
      as.apply(u.view(), out.view(), ws);
      // Expected: only the propagating wave, times exp(i 2π z sqrt(1/λ^2 - fp^2)).
      const double kz = 2 * M_PI * std::sqrt(1 / (hene * hene) - fp * fp);
      Image<cfloat> expect(n, n);
      for (std::size_t y = 0; y < n; ++y)
        for (std::size_t x = 0; x < n; ++x) expect(y, x) = cfloat(std::polar(1.0, 2 * M_PI * fp * x * dx + kz * z));
      // 1e-5: float32 FFTs of a 4096-point array (see tests/fft).
      CHECK(rel_rms(out.view(), expect.view()) < 1e-5);
    }
  }
  // In water (n = 1.333) bin 25 propagates: the output keeps all three waves.
  opt.band_limit = false;
  const double z = 0.5e-6, n_w = 1.333;
  AngularSpectrum water(n, n, make_grid(dx, dx, hene, n_w), z, opt);
  auto ws = water.make_workspace();
  Image<cfloat> out(n, n), expect(n, n);
  water.apply(u.view(), out.view(), ws);
  const double k2 = std::pow(n_w / hene, 2);
  const double kp = 2 * M_PI * std::sqrt(k2 - fp * fp), ke = 2 * M_PI * std::sqrt(k2 - fe * fe);
  for (std::size_t y = 0; y < n; ++y)
    for (std::size_t x = 0; x < n; ++x)
      expect(y, x) = cfloat(std::polar(1.0, 2 * M_PI * fp * x * dx + kp * z) +
                            0.5 * std::polar(1.0, 2 * M_PI * fe * x * dx + ke * z) +
                            0.5 * std::polar(1.0, 2 * M_PI * fe * y * dx + ke * z));
  CHECK(rel_rms(out.view(), expect.view()) < 1e-5);
}

TEST_CASE("+z then -z returns a band-limited field (round trip H(-z) = H(z)* inside the band)") {
  // REFERENCES.md Propagation [from memory]: H(−z) = H(z)* for propagating
  // components, so forward then backward is the identity inside the band.
  // pad_factor = 1 makes the propagation circular, so nothing leaves the
  // window and the identity is exact up to float32 FFT rounding (two
  // forward/inverse pairs, ~1e-6), hence 1e-5. z = 150 µm on a 1 µm grid puts
  // the band limit at ~0.26–0.33/µm, below Nyquist 0.5/µm: the limit is
  // active, and the same for ±z.
  const Grid g = make_grid(1e-6, 1e-6, hene);
  const double z = 150e-6;
  AngularSpectrumOptions opt;
  opt.pad_factor = 1.0;
  for (auto [h, w] : exact_shapes) {
    INFO("shape " << h << "x" << w);
    AngularSpectrum fwd(h, w, g, z, opt), bwd(h, w, g, -z, opt);
    REQUIRE(fwd.padded_height() == h);
    REQUIRE(fwd.padded_width() == w);
    REQUIRE(fwd.band_limit_fx() < 0.5e6);
    CHECK(bwd.band_limit_fx() == fwd.band_limit_fx());
    const double ux = 0.9 * fwd.band_limit_fx(), uy = 0.9 * fwd.band_limit_fy();
    const Image<cfloat> u = random_band_limited(h, w, 1e-6, 1e-6, static_cast<unsigned>(h * w),
                                                [&](double fy, double fx) { return std::abs(fx) <= ux && std::abs(fy) <= uy; });
    auto ws = fwd.make_workspace();
    Image<cfloat> a(h, w), b(h, w);
    fwd.apply(u.view(), a.view(), ws);
    bwd.apply(a.view(), b.view(), ws);
    CHECK(rel_rms(b.view(), u.view()) < 1e-5);
    CHECK(rel_rms(a.view(), u.view()) > 0.1); // the propagation did change the field

    // A full-band field comes back band-passed: the rect band limit squared
    // is itself (|H| = 1 inside, 0 outside).
    const Image<cfloat> full = random_band_limited(h, w, 1e-6, 1e-6, 7u, [](double, double) { return true; });
    fwd.apply(full.view(), a.view(), ws);
    bwd.apply(a.view(), b.view(), ws);
    const Image<cfloat> expect = band_pass(full, 1e-6, 1e-6, fwd.band_limit_fy(), fwd.band_limit_fx());
    CHECK(rel_rms(b.view(), expect.view()) < 1e-5);
  }

  // With zero padding (the default 2x) the round trip holds for a field that
  // stays inside the window: a band-limited random field under a Gaussian
  // envelope of 1/e radius 0.1 of the window (tails e^-25 at the edges),
  // z = 3 µm. What leaves the cropped window is lost, so the tolerance is
  // the same 1e-5 only because the envelope keeps that below ~1e-6.
  for (auto [h, w] : exact_shapes) {
    INFO("padded, shape " << h << "x" << w);
    Image<cfloat> u = random_band_limited(h, w, 1e-6, 1e-6, 99u,
                                          [](double fy, double fx) { return std::abs(fx) <= 0.15e6 && std::abs(fy) <= 0.15e6; });
    for (std::size_t y = 0; y < h; ++y)
      for (std::size_t x = 0; x < w; ++x) {
        const double ry = (y - (h - 1) / 2.0) / (0.1 * h), rx = (x - (w - 1) / 2.0) / (0.1 * w);
        u(y, x) *= static_cast<float>(std::exp(-(rx * rx + ry * ry)));
      }
    AngularSpectrum fwd(h, w, g, 3e-6), bwd(h, w, g, -3e-6);
    auto ws = fwd.make_workspace();
    Image<cfloat> a(h, w), b(h, w);
    fwd.apply(u.view(), a.view(), ws);
    bwd.apply(a.view(), b.view(), ws);
    CHECK(rel_rms(b.view(), u.view()) < 1e-5);
  }
}

TEST_CASE("propagation conserves energy (Parseval) with the band limit inactive") {
  // |H| = 1 for propagating waves, so by Parseval sum |u_z|^2 = sum |u_0|^2
  // (Goodman 2005 ch. 3 [from memory]; REFERENCES.md Autofocus: "∬|U|² is
  // conserved by propagation" [from memory]). Circular (pad 1), every bin
  // propagating (1/λ0 = 1.58/µm > √2 · Nyquist 0.71/µm), band limit at
  // z = 10 µm ≈ 1.5/µm, above Nyquist: inactive. Tolerance 1e-5: float32
  // FFT rounding.
  const Grid g = make_grid(1e-6, 1e-6, hene);
  AngularSpectrumOptions opt;
  opt.pad_factor = 1.0;
  for (auto [h, w] : exact_shapes) {
    INFO("shape " << h << "x" << w);
    for (double z : {10e-6, -10e-6}) {
      AngularSpectrum as(h, w, g, z, opt);
      REQUIRE(as.band_limit_fx() > 0.5e6);
      REQUIRE(as.band_limit_fy() > 0.5e6);
      const Image<cfloat> u = random_band_limited(h, w, 1e-6, 1e-6, 3u, [](double, double) { return true; });
      auto ws = as.make_workspace();
      Image<cfloat> out(h, w);
      as.apply(u.view(), out.view(), ws);
      CHECK(std::abs(energy(out.view()) / energy(u.view()) - 1.0) < 1e-5);
      CHECK(rel_rms(out.view(), u.view()) > 0.1);
    }
  }
  // Padded, for a Gaussian (w0 = 4 µm) that stays well inside the 64 µm window.
  AngularSpectrum as(64, 64, g, 20e-6);
  Image<cfloat> u(64, 64);
  for (std::size_t y = 0; y < 64; ++y)
    for (std::size_t x = 0; x < 64; ++x) {
      const double r2 = (std::pow(y - 32.0, 2) + std::pow(x - 32.0, 2)) * 1e-12;
      u(y, x) = cfloat(static_cast<float>(std::exp(-r2 / 16e-12)), 0.f);
    }
  auto ws = as.make_workspace();
  Image<cfloat> out(64, 64);
  as.apply(u.view(), out.view(), ws);
  CHECK(std::abs(energy(out.view()) / energy(u.view()) - 1.0) < 1e-5);
}

TEST_CASE("distance 0 is an exact copy and the output grid moves by the distance") {
  Grid g = make_grid(0.5e-6, 0.4e-6, hene, 1.333);
  g.plane = 2e-6;
  const Image<cfloat> u = random_band_limited(20, 30, 0.5e-6, 0.4e-6, 1u, [](double, double) { return true; });
  AngularSpectrum zero(20, 30, g, 0.0);
  auto ws = zero.make_workspace();
  Image<cfloat> out(20, 30);
  zero.apply(u.view(), out.view(), ws);
  CHECK(std::memcmp(out.data(), u.data(), u.size() * sizeof(cfloat)) == 0);
  CHECK(zero.output_grid() == g);

  AngularSpectrum as(20, 30, g, -7e-6);
  CHECK(as.output_grid().plane == Approx(-5e-6).epsilon(1e-15));
  CHECK(as.output_grid().dx == g.dx);
  CHECK(as.output_grid().medium_index == g.medium_index);
  CHECK(as.distance() == -7e-6);
}

TEST_CASE("padded sizes are good FFT sizes of ceil(pad_factor * n)") {
  const Grid g = make_grid(1e-6, 1e-6, hene);
  AngularSpectrumOptions opt;
  // 1.35 * 180 evaluates to 243.00000000000003 in double; the padded size
  // must be good_size(243) = 243 = 3^5, not good_size(244) = 245.
  opt.pad_factor = 1.35;
  AngularSpectrum a(180, 31, g, 1e-6, opt);
  CHECK(a.padded_height() == 243);
  opt.pad_factor = 2.0;
  AngularSpectrum b(31, 45, g, 1e-6, opt);
  CHECK(b.padded_height() == fft::good_size(62));
  CHECK(b.padded_width() == 90);
  opt.pad_factor = 1.0;
  AngularSpectrum c(31, 45, g, 1e-6, opt);
  CHECK(c.padded_height() == 32);
  CHECK(c.padded_width() == 45);
}

TEST_CASE("bad settings are configuration errors") {
  const Grid g = make_grid(1e-6, 1e-6, hene);
  AngularSpectrumOptions bad;
  bad.pad_factor = 0.5;
  auto kind_of = [](auto&& make) {
    try {
      make();
    } catch (const Error& e) {
      return e.kind();
    }
    return ErrorKind::internal;
  };
  CHECK(kind_of([&] { AngularSpectrum(10, 10, g, 1e-6, bad); }) == ErrorKind::config);
  CHECK(kind_of([&] { AngularSpectrum(0, 10, g, 1e-6); }) == ErrorKind::config);
  CHECK(kind_of([&] { AngularSpectrum(10, 10, make_grid(0, 1e-6, hene), 1e-6); }) == ErrorKind::config);
  CHECK(kind_of([&] { AngularSpectrum(10, 10, make_grid(1e-6, 1e-6, 0), 1e-6); }) == ErrorKind::config);
  CHECK(kind_of([&] { AngularSpectrum(10, 10, make_grid(1e-6, 1e-6, hene, -1), 1e-6); }) == ErrorKind::config);
  CHECK(kind_of([&] { AngularSpectrum(10, 10, g, std::nan("")); }) == ErrorKind::config);
  // Messages say what is wrong, with the value in readable units.
  CHECK_THROWS_WITH(AngularSpectrum(10, 10, make_grid(-3.45e-7, 1e-6, hene), 1e-6),
                    Catch::Contains("pixel pitch") && Catch::Contains("-345 nm"));
  CHECK_THROWS_WITH(AngularSpectrum(10, 10, g, 1e-6, bad), Catch::Contains("pad_factor") && Catch::Contains("0.5"));
}
