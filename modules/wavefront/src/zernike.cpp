#include "wavestack/wavefront/zernike.hpp"

#include "wavestack/core/error.hpp"

#include <array>
#include <cmath>
#include <cstdlib>
#include <string>

namespace wavestack::wavefront {
namespace {

constexpr int max_terms = terms_up_to_order(max_radial_order);

void check_order(int n) {
  if (n < 0 || n > max_radial_order)
    fail_config("Zernike radial order " + std::to_string(n) + " is outside 0.." +
                std::to_string(max_radial_order));
}

/// R[n][m] for 0 <= m <= n <= nmax by the three-term recurrence; entries
/// with n − m odd stay 0. `r` is (nmax+2)×(nmax+2) row-major (one spare
/// column so R_{n-1}^{m+1} with m+1 = n is read as 0).
void radial_table(int nmax, double rho, double* r) {
  const int s = nmax + 2;
  for (int i = 0; i < s * s; ++i) r[i] = 0.0;
  r[0] = 1.0;
  for (int n = 1; n <= nmax; ++n)
    for (int m = n % 2; m <= n; m += 2) {
      const double a = r[(n - 1) * s + std::abs(m - 1)];
      const double b = r[(n - 1) * s + m + 1];
      const double c = n >= 2 ? r[(n - 2) * s + m] : 0.0;
      r[n * s + m] = rho * (a + b) - c;
    }
}

} // namespace

ZernikeNM ansi_to_nm(int j) {
  if (j < 0) fail_config("Zernike index j = " + std::to_string(j) + " is negative; ANSI indices start at 0");
  int n = 0;
  while (terms_up_to_order(n) <= j) ++n;
  check_order(n);
  const int m = 2 * j - n * (n + 2);
  return {n, m};
}

int nm_to_ansi(int n, int m) {
  check_order(n);
  if (std::abs(m) > n || (n - m) % 2 != 0)
    fail_config("no Zernike term (n, m) = (" + std::to_string(n) + ", " + std::to_string(m) +
                "): need |m| <= n and n - m even");
  return (n * (n + 2) + m) / 2;
}

int ansi_to_noll(int j) {
  const ZernikeNM t = ansi_to_nm(j);
  const int am = std::abs(t.m);
  const int base = t.n * (t.n + 1) / 2 + 1; // first Noll index of order n
  if (am == 0) return base;
  // Pairs (cos, sin) of |m| follow the m = 0 term (n even) in rising |m|.
  const int first = t.n % 2 == 0 ? base + 1 + 2 * (am / 2 - 1) : base + 2 * ((am - 1) / 2);
  const bool first_even = first % 2 == 0;
  return (t.m > 0) == first_even ? first : first + 1;
}

int noll_to_ansi(int noll) {
  if (noll < 1) fail_config("Noll index " + std::to_string(noll) + " is below 1");
  int n = 0;
  while (terms_up_to_order(n) < noll) ++n;
  check_order(n);
  for (int m = -n; m <= n; m += 2) {
    const int j = nm_to_ansi(n, m);
    if (ansi_to_noll(j) == noll) return j;
  }
  fail_internal("Noll index " + std::to_string(noll) + " has no ANSI index");
}

std::string_view zernike_name(int j) noexcept {
  // Names in common use with the ANSI ordering (REFERENCES.md table for
  // j <= 9 and 12; the usual names of the remaining fourth-order terms
  // [common practice]; naming of trefoil/quadrafoil varies between authors).
  static constexpr std::array<std::string_view, 15> names = {
      "piston",
      "vertical tilt",
      "horizontal tilt",
      "oblique astigmatism",
      "defocus",
      "vertical astigmatism",
      "vertical trefoil",
      "vertical coma",
      "horizontal coma",
      "oblique trefoil",
      "oblique quadrafoil",
      "oblique secondary astigmatism",
      "primary spherical",
      "vertical secondary astigmatism",
      "vertical quadrafoil",
  };
  if (j < 0 || j >= static_cast<int>(names.size())) return {};
  return names[static_cast<std::size_t>(j)];
}

double zernike_norm(int n, int m) noexcept {
  return std::sqrt(2.0 * (n + 1) / (m == 0 ? 2.0 : 1.0));
}

double zernike_radial(int n, int m, double rho) {
  check_order(n);
  const int am = std::abs(m);
  if (am > n || (n - am) % 2 != 0) return 0.0;
  std::array<double, (max_radial_order + 2) * (max_radial_order + 2)> r;
  radial_table(n, rho, r.data());
  return r[static_cast<std::size_t>(n * (n + 2) + am)];
}

double zernike(int j, double rho, double theta) {
  const ZernikeNM t = ansi_to_nm(j);
  const int am = std::abs(t.m);
  const double ang = t.m >= 0 ? std::cos(am * theta) : std::sin(am * theta);
  return zernike_norm(t.n, t.m) * zernike_radial(t.n, t.m, rho) * ang;
}

void zernike_basis(double x, double y, std::span<double> out) {
  const int J = static_cast<int>(out.size());
  if (J == 0) return;
  if (J > max_terms)
    fail_config("at most " + std::to_string(max_terms) + " Zernike terms (radial order " +
                std::to_string(max_radial_order) + ") are supported, asked for " + std::to_string(J));
  const int nmax = ansi_to_nm(J - 1).n;
  const double rho = std::hypot(x, y);
  std::array<double, (max_radial_order + 2) * (max_radial_order + 2)> r;
  radial_table(nmax, rho, r.data());
  // cos(kθ), sin(kθ) for k = 0..nmax by angle addition from the unit vector.
  std::array<double, max_radial_order + 1> c, s;
  const double ux = rho > 0 ? x / rho : 1.0, uy = rho > 0 ? y / rho : 0.0;
  c[0] = 1.0;
  s[0] = 0.0;
  for (int k = 1; k <= nmax; ++k) {
    c[static_cast<std::size_t>(k)] = c[static_cast<std::size_t>(k - 1)] * ux - s[static_cast<std::size_t>(k - 1)] * uy;
    s[static_cast<std::size_t>(k)] = s[static_cast<std::size_t>(k - 1)] * ux + c[static_cast<std::size_t>(k - 1)] * uy;
  }
  const int stride = nmax + 2;
  int j = 0;
  for (int n = 0; n <= nmax && j < J; ++n)
    for (int m = -n; m <= n && j < J; m += 2, ++j) {
      const int am = std::abs(m);
      const double rad = r[static_cast<std::size_t>(n * stride + am)];
      const double ang = m >= 0 ? c[static_cast<std::size_t>(am)] : s[static_cast<std::size_t>(am)];
      out[static_cast<std::size_t>(j)] = zernike_norm(n, m) * rad * ang;
    }
}

} // namespace wavestack::wavefront
