// Fresnel diffraction by a square aperture against the Fresnel-integral
// solution computed with scipy.special.fresnel.
#include "propagate_test_util.hpp"

#include "wavestack/propagate/propagator.hpp"

#include <catch2/catch.hpp>

#include <cmath>
#include <complex>
#include <vector>

using namespace wavestack;
using namespace propagate_test;
using namespace wavestack::propagate;

TEST_CASE("square aperture at Fresnel numbers 1, 5, 20 matches the Fresnel-integral solution") {
  // Goodman, Introduction to Fourier Optics, 3rd ed. (2005), Sec. 4.5.1
  // [from memory]; formula in REFERENCES.md "Fresnel diffraction by a
  // rectangular aperture", evaluated by tests/propagate/reference_analytic.py
  // with scipy.special.fresnel (which returns (S, C), S first
  // [confirmed]). N_F = a²/(λz) with a the half-width.
  //
  // Set-up: a = 2 mm, λ = 0.6328 µm, so z = 6.3 m, 1.26 m, 316 mm and the
  // angles are ~a/z <= 6e-3 rad: paraxial enough that the exact angular
  // spectrum must agree with the Fresnel solution too (its difference from
  // the Fresnel TF for the waves reaching the compared region is
  // ≈ πλ³z f⁴/4 < 0.01 rad on components of small amplitude [derived]).
  // Sampling: M samples per half-width; the edge samples (|x| = a exactly)
  // weigh 1/2 (corners 1/4), which makes the sampled aperture's spectrum
  // equal the continuous one to O((πfΔx)²/3) at low f (trapezoid rule,
  // Poisson summation [derived]); a full-weight staircase would move the
  // edges by up to Δx/2. What remains is the hard edge's spectrum near
  // Nyquist, which the grid cannot hold and which reaches the compared
  // region from the edges; it scales roughly as sqrt(N_F)/M, so M grows with
  // N_F (64, 128, 256). Window 8a (4a for N_F >= 5, where the pattern is
  // narrower), auto padding (2 + 4 sqrt(λz)/L: 2.5x, 2.9x, 2.3x). Compared on |x|, |y| <= a.
  // Tolerances from a numpy prototype of the same discretisation
  // (intensity RMS 1.2e-3, 2.1e-3, 2.4e-3 of the mean intensity; field RMS
  // 0.6e-3, 1.2e-3, 1.7e-3 of the RMS field): 5e-3 and 4e-3.
  const double lambda = 0.6328e-6, a = 2e-3;
  struct Case {
    double nf;
    std::size_t m, n;
  };
  for (const Case cs : {Case{1, 64, 512}, Case{5, 128, 512}, Case{20, 256, 1024}}) {
    const double dx = a / static_cast<double>(cs.m), z = a * a / (lambda * cs.nf);
    const std::size_t n = cs.n, c = n / 2, r = 2 * cs.m + 1; // compared region r × r
    INFO("N_F = " << cs.nf << ", " << cs.m << " samples per half-width, " << n << "^2, z = " << z << " m");
    const Grid g = grid_of(dx, dx, lambda);
    std::vector<float> wx(n);
    for (std::size_t j = 0; j < n; ++j) {
      const long off = std::labs(static_cast<long>(j) - static_cast<long>(c));
      wx[j] = off < static_cast<long>(cs.m) ? 1.0f : off == static_cast<long>(cs.m) ? 0.5f : 0.0f;
    }
    Image<cfloat> u(n, n);
    for (std::size_t y = 0; y < n; ++y)
      for (std::size_t x = 0; x < n; ++x) u(y, x) = cfloat(wx[y] * wx[x], 0.0f);

    TempFiles tmp{{temp_path("square_" + std::to_string(static_cast<int>(cs.nf)))}};
    REQUIRE(run_analytic("square " + shell_quoted(tmp.paths[0]) + " " + std::to_string(r) + " " + std::to_string(r) +
                         " " + num17(dx) + " " + num17(dx) + " " + num17(a) + " " + num17(lambda) + " " +
                         num17(z)) == 0);
    const auto ref = read_raw<std::complex<double>>(tmp.paths[0], r * r);
    REQUIRE(ref.size() == r * r);

    for (Method m : {Method::fresnel, Method::angular_spectrum}) {
      INFO(method_name(m));
      PropagatorOptions o;
      o.method = m;
      auto p = make_propagator(n, n, g, z, o);
      CHECK(p->padded_width() >= 2 * n); // auto: 2 + 4 sqrt(λz)/L
      auto ws = p->make_workspace();
      Image<cfloat> out(n, n);
      p->apply(u.view(), out.view(), ws);
      double di = 0, si = 0, df = 0, sf = 0, dap = 0;
      for (std::size_t y = 0; y < r; ++y)
        for (std::size_t x = 0; x < r; ++x) {
          const std::complex<double> got(out(c - cs.m + y, c - cs.m + x)), want = ref[y * r + x];
          const double ig = std::norm(got), iw = std::norm(want);
          di += (ig - iw) * (ig - iw);
          si += iw;
          df += std::norm(got - want);
          sf += iw;
          const double ia = std::norm(std::complex<double>(u(c - cs.m + y, c - cs.m + x)));
          dap += (ia - iw) * (ia - iw);
        }
      const double cnt = static_cast<double>(r * r);
      const double irms = std::sqrt(di / cnt) / (si / cnt), frms = std::sqrt(df / sf);
      INFO("intensity RMS " << irms << ", field RMS " << frms);
      CHECK(irms < 5e-3);
      CHECK(frms < 4e-3);
      // Not a near-identity comparison: the diffraction pattern differs from
      // the aperture's own intensity by far more than the tolerance.
      CHECK(std::sqrt(dap / cnt) / (si / cnt) > 0.05);
    }
  }
}
