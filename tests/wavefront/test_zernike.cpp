// Zernike polynomials: ANSI indices, closed forms, recurrence, orthonormality.
#include "wavestack/core/error.hpp"
#include "wavestack/wavefront/zernike.hpp"

#include <catch2/catch.hpp>

#include <cmath>
#include <cstdlib>
#include <string>
#include <vector>

using namespace wavestack;
using namespace wavestack::wavefront;

namespace {

/// Gauss–Legendre nodes and weights on [−1, 1] (Newton on P_n; test-side).
void gauss_legendre(int n, std::vector<double>& x, std::vector<double>& w) {
  x.resize(static_cast<std::size_t>(n));
  w.resize(static_cast<std::size_t>(n));
  for (int i = 0; i < n; ++i) {
    double z = std::cos(M_PI * (i + 0.75) / (n + 0.5)), dp = 0;
    for (int it = 0; it < 100; ++it) {
      double p0 = 1, p1 = z;
      for (int k = 2; k <= n; ++k) {
        const double p2 = ((2 * k - 1) * z * p1 - (k - 1) * p0) / k;
        p0 = p1;
        p1 = p2;
      }
      dp = n * (z * p1 - p0) / (z * z - 1);
      const double dz = p1 / dp;
      z -= dz;
      if (std::abs(dz) < 1e-16) break;
    }
    x[static_cast<std::size_t>(i)] = z;
    w[static_cast<std::size_t>(i)] = 2 / ((1 - z * z) * dp * dp);
  }
}

/// R_n^m by the factorial sum of the definition, in long double (test-side).
long double radial_sum(int n, int m, long double rho) {
  m = std::abs(m);
  auto fact = [](int k) {
    long double f = 1;
    for (int i = 2; i <= k; ++i) f *= i;
    return f;
  };
  long double r = 0;
  for (int s = 0; s <= (n - m) / 2; ++s) {
    const long double term =
        fact(n - s) / (fact(s) * fact((n + m) / 2 - s) * fact((n - m) / 2 - s)) * std::pow(rho, n - 2 * s);
    r += (s % 2 ? -term : term);
  }
  return r;
}

} // namespace

TEST_CASE("ANSI j <-> (n, m) and Noll numbers follow the ANSI Z80.28 table") {
  // REFERENCES.md "ANSI index table, j = 0..9" and j = 12 (Table A.1 of
  // J. Eur. Opt. Soc.-Rapid Publ. (2025)) [confirmed].
  struct Row {
    int j, n, m, noll;
  };
  const Row table[] = {{0, 0, 0, 1}, {1, 1, -1, 3}, {2, 1, 1, 2},  {3, 2, -2, 5},  {4, 2, 0, 4},   {5, 2, 2, 6},
                       {6, 3, -3, 9}, {7, 3, -1, 7}, {8, 3, 1, 8}, {9, 3, 3, 10}, {12, 4, 0, 11}};
  for (const Row& r : table) {
    INFO("j = " << r.j);
    CHECK(ansi_to_nm(r.j) == ZernikeNM{r.n, r.m});
    CHECK(nm_to_ansi(r.n, r.m) == r.j);
    CHECK(ansi_to_noll(r.j) == r.noll);
    CHECK(noll_to_ansi(r.noll) == r.j);
  }
  // j = (n(n+2)+m)/2 for every valid (n, m) up to the supported order, and
  // the Noll numbering is a bijection of 1..J [derived from the definitions].
  const int J = terms_up_to_order(max_radial_order);
  std::vector<int> seen(static_cast<std::size_t>(J) + 1, 0);
  for (int j = 0; j < J; ++j) {
    const ZernikeNM t = ansi_to_nm(j);
    REQUIRE(std::abs(t.m) <= t.n);
    REQUIRE((t.n - t.m) % 2 == 0);
    REQUIRE(j == (t.n * (t.n + 2) + t.m) / 2);
    const int noll = ansi_to_noll(j);
    REQUIRE(noll >= 1);
    REQUIRE(noll <= J);
    ++seen[static_cast<std::size_t>(noll)];
    // Noll: even numbers go with m > 0 (cos), odd with m < 0 (sin) [from memory;
    // consistent with the confirmed table].
    if (t.m > 0) CHECK(noll % 2 == 0);
    if (t.m < 0) CHECK(noll % 2 == 1);
    REQUIRE(noll_to_ansi(noll) == j);
  }
  for (int k = 1; k <= J; ++k) CHECK(seen[static_cast<std::size_t>(k)] == 1);
  CHECK(terms_up_to_order(4) == 15);
  CHECK(terms_up_to_order(6) == 28);
  CHECK_THROWS_AS(ansi_to_nm(-1), Error);
  CHECK_THROWS_AS(nm_to_ansi(3, 0), Error);
  CHECK_THROWS_AS(nm_to_ansi(2, 4), Error);
  CHECK_THROWS_AS(noll_to_ansi(0), Error);
}

TEST_CASE("the first 15 terms equal their ANSI closed forms") {
  // j = 0..9 and 12: REFERENCES.md table (unit-RMS forms) [confirmed];
  // j = 10, 11, 13, 14 from the definition Z = N R_n^|m| cos/sin(|m|θ) with
  // N = sqrt(2(n+1)/(1+δm0)) [derived]: N = √10, R_4^4 = ρ⁴, R_4^2 = 4ρ⁴ − 3ρ².
  const double s6 = std::sqrt(6.0), s3 = std::sqrt(3.0), s8 = std::sqrt(8.0), s5 = std::sqrt(5.0),
               s10 = std::sqrt(10.0);
  auto closed = [&](int j, double r, double t) {
    switch (j) {
    case 0: return 1.0;
    case 1: return 2 * r * std::sin(t);
    case 2: return 2 * r * std::cos(t);
    case 3: return s6 * r * r * std::sin(2 * t);
    case 4: return s3 * (2 * r * r - 1);
    case 5: return s6 * r * r * std::cos(2 * t);
    case 6: return s8 * std::pow(r, 3) * std::sin(3 * t);
    case 7: return s8 * (3 * std::pow(r, 3) - 2 * r) * std::sin(t);
    case 8: return s8 * (3 * std::pow(r, 3) - 2 * r) * std::cos(t);
    case 9: return s8 * std::pow(r, 3) * std::cos(3 * t);
    case 10: return s10 * std::pow(r, 4) * std::sin(4 * t);
    case 11: return s10 * (4 * std::pow(r, 4) - 3 * r * r) * std::sin(2 * t);
    case 12: return s5 * (6 * std::pow(r, 4) - 6 * r * r + 1);
    case 13: return s10 * (4 * std::pow(r, 4) - 3 * r * r) * std::cos(2 * t);
    case 14: return s10 * std::pow(r, 4) * std::cos(4 * t);
    }
    return 0.0;
  };
  std::vector<double> basis(15);
  for (double r : {0.0, 0.13, 0.5, 0.707, 0.93, 1.0})
    for (double t : {0.0, 0.4, 1.5707963267948966, 2.2, 3.5, 5.9}) {
      zernike_basis(r * std::cos(t), r * std::sin(t), basis);
      for (int j = 0; j < 15; ++j) {
        INFO("j = " << j << ", rho = " << r << ", theta = " << t);
        // Double round-off on values of order 1 (sums of a few terms).
        CHECK(zernike(j, r, t) == Approx(closed(j, r, t)).margin(1e-13));
        CHECK(basis[static_cast<std::size_t>(j)] == Approx(closed(j, r, t)).margin(1e-13));
      }
    }
  // Names of the first 15 terms (REFERENCES.md table; others [common practice]).
  CHECK(zernike_name(0) == "piston");
  CHECK(zernike_name(1) == "vertical tilt");
  CHECK(zernike_name(2) == "horizontal tilt");
  CHECK(zernike_name(4) == "defocus");
  CHECK(zernike_name(7) == "vertical coma");
  CHECK(zernike_name(8) == "horizontal coma");
  CHECK(zernike_name(12) == "primary spherical");
  for (int j = 0; j < 15; ++j) CHECK(!zernike_name(j).empty());
  CHECK(zernike_name(15).empty());
  CHECK(zernike_name(-1).empty());
}

TEST_CASE("the radial recurrence agrees with the factorial sum of the definition") {
  // R_n^m = Σ_s (−1)^s (n−s)!/(s!((n+m)/2−s)!((n−m)/2−s)!) ρ^(n−2s)
  // (REFERENCES.md "Standards and definition" [confirmed; citation from
  // memory]), evaluated in long double. Up to n = 20 the alternating sum
  // still holds ~1e-12 in long double (largest terms ~1e7), so 1e-10 is
  // the check's own accuracy, not the recurrence's.
  for (int n = 0; n <= 20; ++n)
    for (int m = n % 2; m <= n; m += 2)
      for (double r : {0.0, 0.1, 0.37, 0.5, 0.81, 0.99, 1.0}) {
        INFO("n = " << n << ", m = " << m << ", rho = " << r);
        CHECK(zernike_radial(n, m, r) == Approx(static_cast<double>(radial_sum(n, m, r))).margin(1e-10));
      }
  // R_n^m(1) = 1 for every n, m [derived from the generating sum]; |R| <= 1 on [0, 1].
  for (int n = 0; n <= max_radial_order; ++n)
    for (int m = n % 2; m <= n; m += 2) {
      CHECK(zernike_radial(n, m, 1.0) == Approx(1.0).margin(1e-12));
      for (double r = 0; r <= 1.0; r += 0.01) REQUIRE(std::abs(zernike_radial(n, m, r)) <= 1 + 1e-12);
    }
  CHECK(zernike_radial(4, 1, 0.5) == 0.0); // n − m odd
  CHECK(zernike_radial(2, 4, 0.5) == 0.0); // m > n
}

TEST_CASE("Zernike terms are orthonormal over the unit disk on a polar quadrature") {
  // (1/π) ∫0^1 ∫0^2π Z_j Z_k ρ dρ dθ = δ_jk (REFERENCES.md [derived]).
  // Quadrature: 24-point Gauss–Legendre in ρ (exact for polynomials of
  // degree <= 47; the integrand has degree <= 2·10 + 1 in ρ) and 64 equal
  // steps in θ (exact for trigonometric polynomials of degree < 64; here
  // <= 20). What remains is double round-off (~1e-14).
  const int J = terms_up_to_order(10); // 66 terms, n <= 10
  std::vector<double> x, w;
  gauss_legendre(24, x, w);
  const int nt = 64;
  std::vector<double> g(static_cast<std::size_t>(J * J), 0.0), z(static_cast<std::size_t>(J));
  for (std::size_t i = 0; i < x.size(); ++i) {
    const double rho = 0.5 * (x[i] + 1), wr = 0.5 * w[i] * rho;
    for (int k = 0; k < nt; ++k) {
      const double th = 2 * M_PI * k / nt;
      zernike_basis(rho * std::cos(th), rho * std::sin(th), z);
      const double wt = wr * (2 * M_PI / nt) / M_PI;
      for (int a = 0; a < J; ++a)
        for (int b = 0; b < J; ++b)
          g[static_cast<std::size_t>(a * J + b)] += wt * z[static_cast<std::size_t>(a)] * z[static_cast<std::size_t>(b)];
    }
  }
  double worst = 0;
  for (int a = 0; a < J; ++a)
    for (int b = 0; b < J; ++b)
      worst = std::max(worst, std::abs(g[static_cast<std::size_t>(a * J + b)] - (a == b ? 1.0 : 0.0)));
  INFO("max |G − I| = " << worst);
  CHECK(worst < 1e-12);
}

TEST_CASE("Zernike terms are nearly orthonormal on a pixel disk") {
  // Discrete version of the same identity: mean over the pixel centres of a
  // disk of radius R of Z_j Z_k. The staircase boundary and midpoint
  // sampling make it deviate from δ_jk by O(1/R) for terms that are large at
  // the rim. Measured max |G − I| for J = 15: 0.0247 at R = 32, 0.0083 at
  // R = 64, 0.0022 at R = 128 — at most first order in 1/R (the lattice
  // boundary errors partly cancel, so it falls faster); the tolerance 1/R
  // bounds the first-order term with 25% margin at R = 32.
  const int J = 15;
  std::vector<double> z(J);
  double prev = 1;
  for (double R : {32.0, 64.0, 128.0}) {
    const int n = static_cast<int>(2 * R);
    const double c = (n - 1) / 2.0;
    std::vector<double> g(J * J, 0.0);
    long count = 0;
    for (int row = 0; row < n; ++row)
      for (int col = 0; col < n; ++col) {
        const double xx = (col - c) / R, yy = (c - row) / R;
        if (xx * xx + yy * yy > 1) continue;
        ++count;
        zernike_basis(xx, yy, z);
        for (int a = 0; a < J; ++a)
          for (int b = 0; b < J; ++b) g[static_cast<std::size_t>(a * J + b)] += z[static_cast<std::size_t>(a)] * z[static_cast<std::size_t>(b)];
      }
    double worst = 0;
    for (int a = 0; a < J; ++a)
      for (int b = 0; b < J; ++b)
        worst = std::max(worst, std::abs(g[static_cast<std::size_t>(a * J + b)] / static_cast<double>(count) - (a == b ? 1.0 : 0.0)));
    INFO("R = " << R << ": max |G − I| = " << worst);
    CHECK(worst < 1.0 / R);
    CHECK(worst < prev); // converges as R grows
    prev = worst;
  }
}

TEST_CASE("peak-to-valley of unit terms over the closed unit disk") {
  // REFERENCES.md "RMS, P–V" [derived]: tilt 4, defocus 2√3, primary
  // spherical 1.5√5. Dense polar grid that contains ρ = 0, 1 and
  // ρ² = 1/2 (the spherical minimum) and θ multiples of π/2, where the
  // extremes lie; the values are then exact to round-off.
  auto pv = [](int j) {
    double lo = 1e300, hi = -1e300;
    for (int i = 0; i <= 1000; ++i) {
      const double rho = std::sqrt(i / 1000.0);
      for (int k = 0; k < 360; ++k) {
        const double v = zernike(j, rho, 2 * M_PI * k / 360);
        lo = std::min(lo, v);
        hi = std::max(hi, v);
      }
    }
    return hi - lo;
  };
  CHECK(pv(1) == Approx(4.0).epsilon(1e-12));
  CHECK(pv(2) == Approx(4.0).epsilon(1e-12));
  CHECK(pv(4) == Approx(2 * std::sqrt(3.0)).epsilon(1e-12));
  CHECK(pv(12) == Approx(1.5 * std::sqrt(5.0)).epsilon(1e-12));
}
