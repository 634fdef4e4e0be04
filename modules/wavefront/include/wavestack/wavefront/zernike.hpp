#pragma once
// Zernike polynomials in the ANSI Z80.28 / ISO 24157 convention
// (Thibos et al., J. Refract. Surg. 18(5), S652 (2002)):
//
//   Z_j(ρ, θ) = N_n^m · R_n^|m|(ρ) · cos(|m| θ)   for m >= 0,
//   Z_j(ρ, θ) = N_n^m · R_n^|m|(ρ) · sin(|m| θ)   for m <  0,
//   N_n^m     = sqrt(2(n + 1) / (1 + δ_m0)),
//   j         = (n(n + 2) + m) / 2                 (single index from 0),
//
// θ measured from the +x axis, counter-clockwise (towards +y), ρ in [0, 1]
// the radius normalised to the pupil radius. With this normalisation each
// term has unit RMS over the unit disk:
//   (1/π) ∫0^1 ∫0^2π Z_j Z_k ρ dρ dθ = δ_jk,
// so the RMS of a wavefront Σ c_j Z_j is sqrt(Σ c_j²).
//
// Image axes: functions here take pupil coordinates (x, y) or (ρ, θ) only.
// How image rows map to y is decided by the fits (zernike_fit.hpp): x grows
// with the column index and, by default, y grows towards row 0 (y up, as in
// a preview image displayed with row 0 at the top).
//
// Radial polynomials are evaluated in double by the three-term recurrence
//   R_n^m(ρ) = ρ [R_{n-1}^{|m-1|}(ρ) + R_{n-1}^{m+1}(ρ)] − R_{n-2}^m(ρ),
// with R_0^0 = 1 and R_n^m = 0 for m > n, which only adds and multiplies
// values bounded by 1 on [0, 1] (no large alternating factorial sums), so
// it is accurate for every order up to max_radial_order.
#include <cstddef>
#include <span>
#include <string_view>

namespace wavestack::wavefront {

/// Radial order n and azimuthal frequency m (|m| <= n, n − m even).
struct ZernikeNM {
  int n = 0;
  int m = 0;
  bool operator==(const ZernikeNM&) const = default;
};

/// Highest radial order the evaluators accept (861 terms).
inline constexpr int max_radial_order = 40;

/// ANSI single index j (from 0) to (n, m). Throws Error(config) when j < 0
/// or the order exceeds max_radial_order.
ZernikeNM ansi_to_nm(int j);
/// (n, m) to the ANSI single index j = (n(n+2)+m)/2. Throws Error(config)
/// unless 0 <= n <= max_radial_order, |m| <= n and n − m is even.
int nm_to_ansi(int n, int m);
/// Noll's index (from 1; Noll, JOSA 66(3), 207 (1976)) of ANSI index j,
/// for cross-reference with tables that use it: within order n, Noll
/// numbers rise with |m|, even Noll numbers go with cos (m > 0), odd with
/// sin (m < 0). Throws like ansi_to_nm.
int ansi_to_noll(int j);
/// Inverse of ansi_to_noll; throws Error(config) for noll < 1.
int noll_to_ansi(int noll);

/// Number of terms of radial order <= n: (n + 1)(n + 2)/2.
constexpr int terms_up_to_order(int n) noexcept { return (n + 1) * (n + 2) / 2; }

/// Conventional name of ANSI term j = 0..14 ("piston", "vertical tilt", ...
/// "vertical quadrafoil"); an empty view for j outside 0..14.
std::string_view zernike_name(int j) noexcept;

/// Normalisation N_n^m = sqrt(2(n+1)/(1+δ_m0)).
double zernike_norm(int n, int m) noexcept;
/// Radial polynomial R_n^|m|(ρ) (0 when n − |m| is odd or |m| > n).
/// Throws Error(config) for n < 0 or n > max_radial_order.
double zernike_radial(int n, int m, double rho);
/// Z_j(ρ, θ) for ANSI index j; θ in radians from +x, counter-clockwise.
double zernike(int j, double rho, double theta);

/// Evaluate Z_0 .. Z_{J−1} at the Cartesian pupil point (x, y)
/// (ρ = hypot(x, y), θ = atan2(y, x); cos|m|θ, sin|m|θ by the angle
/// addition recurrence, no trigonometric calls) into out[0..J−1], J =
/// out.size(). At ρ = 0 only the m = 0 terms are non-zero. Cost
/// O(n_max²) per point; allocates nothing. Throws Error(config) when J
/// exceeds terms_up_to_order(max_radial_order).
void zernike_basis(double x, double y, std::span<double> out);

} // namespace wavestack::wavefront
