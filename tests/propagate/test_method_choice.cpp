// Method choice by the sampling criterion, out-of-range warnings, automatic
// padding.
#include "propagate_test_util.hpp"

#include "wavestack/core/error.hpp"
#include "wavestack/core/log.hpp"
#include "wavestack/propagate/method.hpp"
#include "wavestack/propagate/propagator.hpp"

#include <catch2/catch.hpp>

#include <cmath>

using namespace wavestack;
using namespace propagate_test;
using namespace wavestack::propagate;

namespace {

constexpr double hene = 0.6328e-6;

/// 2π|z| |sqrt(1/λ² − f²) − 1/λ + λf²/2| in long double: the paraxial phase
/// error, evaluated directly (not by the closed form the module uses).
double paraxial_direct(double lambda, double f, double z) {
  const long double l = lambda, ff = f;
  const long double d = std::sqrt(1.0L / (l * l) - ff * ff) - 1.0L / l + l * ff * ff / 2.0L;
  return static_cast<double>(2.0L * M_PIl * std::fabs(static_cast<long double>(z)) * std::fabs(d));
}

PropagatorOptions with(std::optional<Method> m, Padding p = Padding::automatic(), double fmax = 0.0) {
  PropagatorOptions o;
  o.method = m;
  o.padding = p;
  o.max_frequency = fmax;
  return o;
}

} // namespace

TEST_CASE("auto chooses by the critical pitch λz/L_p on each side of it (REFERENCES.md example)") {
  // Voelz & Roggemann, Appl. Opt. 48(32) 6132 (2009): critical pitch λz/L
  // [from memory]; REFERENCES.md Sampling criteria derivation [derived]: the
  // transfer function sampled at 1/L_p meets Nyquist iff Δx >= λz/L_p. Example
  // N = 512, Δx = 3.45 µm, λ = 0.6328 µm, padded to 2N: L_p = 3532.8 µm, so the
  // critical distance L_pΔx/λ = 2NΔx²/λ = 19.26 mm (REFERENCES.md [derived]).
  log::clear_warnings();
  const double dx = 3.45e-6;
  const Grid g = grid_of(dx, dx, hene);
  const double zc = 2 * 512 * dx * dx / hene;
  CHECK(zc * 1e3 == Approx(19.26).margin(0.005));

  const auto pad2 = with(std::nullopt, Padding::of(2));
  const MethodChoice near = choose_method(512, 512, g, 19.2e-3, pad2);
  CHECK(near.method == Method::angular_spectrum);
  CHECK(near.pad_factor == 2.0);
  CHECK(near.critical_dx_padded == Approx(hene * 19.2e-3 / (1024 * dx)).epsilon(1e-12));
  CHECK(near.critical_dx_padded < dx);
  CHECK(near.bandwidth_kept > 0.99); // u_limit just below Nyquist: 19.18 mm < z < 19.26 mm
  CHECK_THAT(near.reason, Catch::Contains("angular spectrum") && Catch::Contains("3.45 um") &&
                              Catch::Contains("19.2 mm") && Catch::Contains("critical pitch"));
  CHECK_FALSE(near.explicit_out_of_range);
  CHECK_FALSE(near.auto_out_of_range);

  const MethodChoice far = choose_method(512, 512, g, 19.3e-3, pad2);
  CHECK(far.method == Method::fresnel_single_fft);
  CHECK(far.pad_factor == 2.0); // an explicit factor applies to single-FFT too (finer output)
  // With automatic padding single-FFT Fresnel gets none (it does not wrap).
  CHECK(choose_method(512, 512, g, 50e-3).method == Method::fresnel_single_fft);
  CHECK(choose_method(512, 512, g, 50e-3).pad_factor == 1.0);
  CHECK(far.critical_dx_source == Approx(hene * 19.3e-3 / (512 * dx)).epsilon(1e-12));
  CHECK_THAT(far.reason, Catch::Contains("single-FFT") && Catch::Contains("19.3 mm") && Catch::Contains("keep only"));
  // With the full grid bandwidth (Nyquist corner sqrt(2)/(2Δx)) the Fresnel
  // approximation is poor at the band edge: ≈ πλ³zf⁴/4 = 6.8 rad [derived].
  const double corner = std::sqrt(2.0) / (2 * dx);
  CHECK(far.paraxial_error == Approx(paraxial_direct(hene, corner, 19.3e-3)).epsilon(1e-9));
  CHECK(far.paraxial_error == Approx(M_PI * std::pow(hene, 3) * 19.3e-3 * std::pow(corner, 4) / 4).epsilon(0.01));
  CHECK(far.paraxial_error == Approx(6.8).margin(0.05));
  CHECK(far.auto_out_of_range);
  // A known band (max_frequency 0.03 cycles/µm) changes the pitch in the
  // transfer-function criterion to 1/(2 f_max) = 16.7 µm: at 19.3 mm the band
  // is fully sampled, and the critical distance moves to 16.7 µm · L_p/λ = 93 mm.
  const double fb = 0.03e6;
  const auto band = with(std::nullopt, Padding::of(2), fb);
  const MethodChoice far_band = choose_method(512, 512, g, 19.3e-3, band);
  CHECK(far_band.method == Method::angular_spectrum);
  CHECK(far_band.bandwidth_kept == 1.0);
  CHECK_THAT(far_band.reason, Catch::Contains("effective pitch"));
  CHECK(choose_method(512, 512, g, 92e-3, band).method == Method::angular_spectrum);
  const MethodChoice farther = choose_method(512, 512, g, 200e-3, band);
  CHECK(farther.method == Method::fresnel_single_fft);
  // ...and single-FFT Fresnel is then paraxial for that band: 0.03 rad.
  CHECK_FALSE(farther.auto_out_of_range);
  CHECK(farther.paraxial_error == Approx(paraxial_direct(hene, fb, 200e-3)).epsilon(1e-9));
  CHECK(farther.paraxial_error < 0.1);

  // make_propagator builds what was chosen, and warns once for the poor
  // paraxial case (never a silent approximation).
  auto p = make_propagator(512, 512, g, 19.3e-3, pad2);
  CHECK(p->method() == Method::fresnel_single_fft);
  CHECK(dynamic_cast<FresnelSingleFFT*>(p.get()) != nullptr);
  std::size_t n = 0;
  CHECK(warned("single-FFT Fresnel", &n));
  CHECK(n == 1);
  auto p2 = make_propagator(512, 512, g, 25e-3, pad2); // same set-up, farther: no second warning
  warned("single-FFT Fresnel", &n);
  CHECK(n == 1);
  // Distance 0 is a copy by the angular spectrum.
  CHECK(choose_method(512, 512, g, 0.0).method == Method::angular_spectrum);
  // Negative distances use |z|.
  CHECK(choose_method(512, 512, g, -19.3e-3, pad2).method == Method::fresnel_single_fft);
  CHECK(choose_method(512, 512, g, -19.2e-3, pad2).method == Method::angular_spectrum);
  // Auto padding adds the band-limit margin 4 sqrt(λz)/L to 2 here
  // (auto_pad_factor below), which moves the critical distance out a little.
  const double auto_f = 2 + 4 * std::sqrt(hene * 19.3e-3) / (512 * dx);
  const MethodChoice autop = choose_method(512, 512, g, 19.3e-3);
  CHECK(autop.pad_factor == Approx(auto_f).epsilon(1e-12));
  CHECK(autop.method == Method::angular_spectrum);
}

TEST_CASE("explicit methods out of range run but warn once, with the numbers") {
  log::clear_warnings();
  const double dx = 3.45e-6;
  const Grid g = grid_of(dx, dx, hene);
  Image<cfloat> u(64, 64, cfloat(1, 0)), out(64, 64);

  SECTION("angular spectrum beyond the critical distance: bandwidth kept") {
    // u_limit = 1/(λ sqrt((2Δu z)² + 1)) (Matsushima & Shimobaba 2009 [from memory]),
    // Δu = 1/(128 Δx); kept fraction u_limit / (1/(2Δx)).
    const double z = 100e-3;
    const MethodChoice c = choose_method(64, 64, g, z, with(Method::angular_spectrum, Padding::of(2)));
    CHECK(c.explicit_out_of_range);
    const double ulim = 1.0 / (hene * std::sqrt(std::pow(2 * z / (128 * dx), 2) + 1));
    CHECK(c.bandwidth_kept == Approx(ulim * 2 * dx).epsilon(1e-12));
    CHECK_THAT(c.reason, Catch::Contains("beyond its sampling range") && Catch::Contains("keeps") &&
                             Catch::Contains("100 mm"));
    for (int i = 0; i < 3; ++i) {
      auto p = make_propagator(64, 64, g, z * (1 + i), with(Method::angular_spectrum, Padding::of(2)));
      auto ws = p->make_workspace();
      p->apply(u.view(), out.view(), ws); // it runs
    }
    std::size_t n = 0;
    CHECK(warned("angular spectrum (requested) beyond its sampling range", &n));
    CHECK(n == 1);
  }
  SECTION("Fresnel transfer function with a poor paraxial approximation") {
    // Microscope-like grid: Δx = 0.2 µm, the band edge is far from paraxial.
    const Grid gm = grid_of(0.2e-6, 0.2e-6, hene, 1.333);
    const MethodChoice c = choose_method(64, 64, gm, 10e-6, with(Method::fresnel));
    CHECK(c.explicit_out_of_range);
    CHECK(c.paraxial_error > 0.1);
    CHECK_THAT(c.reason, Catch::Contains("paraxial phase error") && Catch::Contains("tolerance 0.1 rad"));
    // Limiting the band to a paraxial 0.02 cycles/µm makes it in range:
    // πλ³zf⁴/4 ~ 3e-8 rad.
    const MethodChoice ok = choose_method(64, 64, gm, 10e-6, with(Method::fresnel, Padding::automatic(), 0.02e6));
    CHECK_FALSE(ok.explicit_out_of_range);
    CHECK(ok.paraxial_error == Approx(paraxial_direct(hene / 1.333, 0.02e6, 10e-6)).epsilon(1e-6));
    auto p = make_propagator(64, 64, gm, 10e-6, with(Method::fresnel));
    auto q = make_propagator(64, 64, gm, 12e-6, with(Method::fresnel));
    std::size_t n = 0;
    CHECK(warned("Fresnel transfer function (requested) out of range", &n));
    CHECK(n == 1);
    log::clear_warnings();
    auto r = make_propagator(64, 64, gm, 10e-6, with(Method::fresnel, Padding::automatic(), 0.02e6));
    CHECK_FALSE(warned("Fresnel"));
  }
  SECTION("single-FFT Fresnel at a short distance: undersampled input chirp") {
    // Critical source pitch λz/L = 0.6328 µm · 1 mm / (64 · 3.45 µm) = 2.87 µm < 3.45 µm.
    const MethodChoice c = choose_method(64, 64, g, 1e-3, with(Method::fresnel_single_fft, Padding::automatic(), 0.01e6));
    CHECK(c.explicit_out_of_range);
    CHECK(c.critical_dx_source == Approx(hene * 1e-3 / (64 * dx)).epsilon(1e-12));
    CHECK_THAT(c.reason, Catch::Contains("input chirp is undersampled") && Catch::Contains("2.866 um"));
    auto p = make_propagator(64, 64, g, 1e-3, with(Method::fresnel_single_fft, Padding::automatic(), 0.01e6));
    auto ws = p->make_workspace();
    Image<cfloat> o(p->out_height(), p->out_width());
    p->apply(u.view(), o.view(), ws);
    CHECK(warned("input chirp is undersampled"));
    // In range at 10 mm (critical pitch 28.7 µm).
    CHECK_FALSE(choose_method(64, 64, g, 10e-3, with(Method::fresnel_single_fft, Padding::automatic(), 0.01e6))
                    .explicit_out_of_range);
  }
}

TEST_CASE("auto padding keeps the spread inside the padded window") {
  // Derivation in method.hpp [derived]: P/L = max(1 + a/L, 2a/L + 4s/L) for
  // a <= L, else 2 + 4s/L, with a = |z| tanθ (θ of the steepest wave the band
  // allows) and s = sqrt(λ|z|); capped at 4.
  SECTION("typical microscope: NA-limited band") {
    // 1024², 3.45 µm camera pitch at 40x = 86.25 nm, water n = 1.333, NA 0.75:
    // sinθ = λ0/n · NA/λ0 = NA/n = 0.5626, tanθ = 0.6806; over 20 µm the
    // field spreads 13.6 µm on an 88.3 µm window: factor 1.154, padded 1200.
    const Grid g = grid_of(86.25e-9, 86.25e-9, hene, 1.333);
    const double s = 0.75 / 1.333, t = s / std::sqrt(1 - s * s);
    const double f = auto_pad_factor(1024, 1024, g, 20e-6, 0.75 / hene);
    CHECK(f == Approx(1 + 20e-6 * t / (1024 * 86.25e-9)).epsilon(1e-12));
    CHECK(f == Approx(1.154).margin(0.001));
    CHECK(padded_length(1024, f) == 1200);
    CHECK(auto_pad_factor(1024, 1024, g, -20e-6, 0.75 / hene) == f);
    // Without the NA the grid's corner frequencies are evanescent
    // (Nyquist 5.8 cycles/µm > n/λ0 = 2.1): grazing waves, a > L.
    CHECK(auto_pad_factor(1024, 1024, g, 20e-6) ==
          Approx(2 + 4 * std::sqrt(hene / 1.333 * 20e-6) / (1024 * 86.25e-9)).epsilon(1e-12));
    CHECK(auto_pad_factor(1024, 1024, g, 0.0) == 1.0);
  }
  SECTION("grid-limited band with the other axis filling the remaining circle") {
    // Δx = Δy = 1 µm (Nyquist 0.5/µm), f_max = 0.6/µm: fx = 0.5, fy = sqrt(0.36 − 0.25).
    const Grid g = grid_of(1e-6, 1e-6, hene);
    const double fx = 0.5e6, fy = std::sqrt(0.36e12 - 0.25e12);
    const double tan_x = hene * fx / std::sqrt(1 - hene * hene * (fx * fx + fy * fy));
    // The y axis (window 100 µm) needs more than x (200 µm); here L + a > 2a + 4s.
    CHECK(auto_pad_factor(100, 200, g, 30e-6, 0.6e6) == Approx(1 + 30e-6 * tan_x / (100e-6)).epsilon(1e-12));
    CHECK(1 + 30e-6 * tan_x / 100e-6 > (2 * 30e-6 * tan_x + 4 * std::sqrt(hene * 30e-6)) / 100e-6);
    // Band limited by the grid only: both axes at Nyquist.
    const double t2 = hene * 0.5e6 / std::sqrt(1 - hene * hene * 0.5e12);
    CHECK(auto_pad_factor(100, 200, g, 30e-6) == Approx(1 + 30e-6 * t2 / 100e-6).epsilon(1e-12));
  }
  SECTION("band limit off: capped at 4 with a warning; the margin term") {
    log::clear_warnings();
    const Grid g = grid_of(1e-6, 1e-6, hene);
    CHECK(auto_pad_factor(64, 64, g, 1e-3, 0.0, false) == 4.0);
    CHECK(warned("capped at 4x"));
    CHECK(auto_pad_factor(64, 64, g, 1e-3, 0.0, true) == Approx(2 + 4 * std::sqrt(hene * 1e-3) / 64e-6).epsilon(1e-12));
    // Short distance, small spread: the band-limit margin decides.
    const double a = 2e-6 * hene * 0.5e6 / std::sqrt(1 - hene * hene * 0.5e12);
    CHECK(auto_pad_factor(64, 64, g, 2e-6) == Approx(std::max(64e-6 + a, 2 * a + 4 * std::sqrt(hene * 2e-6)) / 64e-6).epsilon(1e-12));
  }
  SECTION("the propagators use it") {
    const Grid g = grid_of(86.25e-9, 86.25e-9, hene, 1.333);
    PropagatorOptions o;
    o.max_frequency = 0.75 / hene;
    auto p = make_propagator(1024, 1024, g, 20e-6, o);
    CHECK(p->method() == Method::angular_spectrum);
    CHECK(p->padded_height() == 1200);
    CHECK(p->padded_width() == 1200);
    o.padding = Padding::none();
    CHECK(make_propagator(1024, 1024, g, 20e-6, o)->padded_width() == 1024);
    o.padding = Padding::of(2);
    CHECK(make_propagator(1024, 1024, g, 20e-6, o)->padded_width() == 2048);
  }
}

TEST_CASE("method names, and bad settings are configuration errors") {
  std::optional<Method> m;
  CHECK(parse_method("auto", &m));
  CHECK_FALSE(m);
  CHECK(parse_method("fresnel-single-fft", &m));
  CHECK(m == Method::fresnel_single_fft);
  CHECK(parse_method("angular-spectrum", &m));
  CHECK(m == Method::angular_spectrum);
  CHECK_FALSE(parse_method("fraunhofer", &m));
  for (Method x : {Method::angular_spectrum, Method::fresnel, Method::fresnel_single_fft}) {
    std::optional<Method> back;
    CHECK(parse_method(method_name(x), &back));
    CHECK(back == x);
  }
  const Grid g = grid_of(1e-6, 1e-6, hene);
  auto kind = [](auto&& f) {
    try {
      f();
    } catch (const Error& e) {
      return e.kind();
    }
    return ErrorKind::internal;
  };
  CHECK(kind([&] { make_propagator(8, 8, g, 1e-6, with(Method::fresnel, Padding::of(0.5))); }) == ErrorKind::config);
  CHECK(kind([&] { make_propagator(8, 8, g, 0.0, with(Method::fresnel_single_fft)); }) == ErrorKind::config);
  CHECK(kind([&] { make_propagator(0, 8, g, 1e-6); }) == ErrorKind::config);
  CHECK(kind([&] { make_propagator(8, 8, grid_of(1e-6, 1e-6, 0.0), 1e-6); }) == ErrorKind::config);
  PropagatorOptions bad;
  bad.paraxial_tolerance = 0;
  CHECK(kind([&] { choose_method(8, 8, g, 1e-6, bad); }) == ErrorKind::config);
  CHECK_THROWS_WITH(make_propagator(8, 8, g, 0.0, with(Method::fresnel_single_fft)),
                    Catch::Contains("non-zero distance"));
}
