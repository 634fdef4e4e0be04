#pragma once
// Propagation methods, padding and the sampling criterion that chooses
// between them.
//
// Methods (λ = λ0/n, k = 2π/λ, f² = fx² + fy², z the signed distance):
//  * angular_spectrum: exact scalar transfer function
//    exp(i 2π z sqrt(1/λ² − f²)), band-limited, zero-padded (AngularSpectrum,
//    TransferPropagator). Output on the input grid.
//  * fresnel: paraxial transfer function e^{ikz} exp(−iπλz f²), band-limited
//    the same way, zero-padded. Output on the input grid.
//  * fresnel_single_fft: U2(x2) = e^{ikz}/(iλz) e^{iπx2²/(λz)}
//    FFT{U1 e^{iπx1²/(λz)}} Δx1 Δy1 (FresnelSingleFFT). Output pitch
//    λ|z|/(P·Δx1) per axis, P the padded length; see propagator.hpp.
//
// Sampling criterion (Voelz & Roggemann, Appl. Opt. 48(32), 6132 (2009)
// [from memory; consistent with the derivation in REFERENCES.md]): the
// critical pitch is λ|z|/L per axis, L the window.
//  * A transfer function sampled at Δf = 1/L_p (L_p = P·Δx, the PADDED
//    window: that is the grid H is sampled on) meets Nyquist up to the
//    grid's Nyquist frequency 1/(2Δx) iff Δx >= λ|z|/L_p [derived]. Beyond
//    (Δx < λ|z|/L_p, long distances) the band limit cuts it to
//    u_limit ≈ L_p/(2λ|z|): the result stays exact inside the output window
//    (the cut waves travel more than L_p/2 sideways and cannot reach it), but
//    only the fraction u_limit·2Δx = Δx/(λ|z|/L_p) of the bandwidth per axis
//    survives, and the window, which does not grow with z, shows an ever
//    smaller part of the spreading field.
//  * The single-FFT chirp e^{iπx1²/(λz)} lives on the field's support, the
//    UNPADDED source window L = N·Δx (the padding is zeros): its local
//    frequency |x1|/(λ|z|) stays <= 1/(2Δx) over |x1| <= L/2 iff
//    Δx <= λ|z|/L [derived]. Its output window λ|z|/Δx grows with z and holds
//    the whole diffracted field with the full source bandwidth.
//  * When the field's band is known (max_frequency f_max below the grid's
//    Nyquist frequency), H only needs samples up to f_max, so the pitch in
//    the transfer-function criterion is the effective pitch
//    max(Δx, 1/(2 f_max)) [derived: λ|z| f_max <= L_p/2]. A microscope
//    field (86 nm pitch, NA 0.75 in water) is then fully sampled to
//    z ≈ 150 um instead of 19 um.
// Because L_p >= L the two ranges overlap (λ|z|/L_p <= Δx <= λ|z|/L, both
// valid), so `auto` never falls between them:
//   z == 0                      → angular_spectrum (a copy);
//   effective pitch >= λ|z|/L_p on both axes
//                               → angular_spectrum (exact, fully sampled);
//   otherwise                   → fresnel_single_fft.
// `auto` follows the sampling criterion only; when the single-FFT paraxial
// phase error (below) exceeds paraxial_tolerance it still uses it, sets
// auto_out_of_range, says so in the reason and warns once (near the critical
// distance and with the full grid bandwidth that error is large: e.g. 6.8 rad
// at the Nyquist corner for the 512 × 3.45 um example at 19.3 mm; giving the
// field's real bandwidth as max_frequency removes the warning when it is
// smaller).
// Paraxial phase error at the band edge f_e (the highest frequency
// propagated: min(grid Nyquist, band limit, max_frequency), radially):
//   Δφ = 2π|z| |sqrt(1/λ² − f_e²) − 1/λ + λ f_e²/2| ≈ π λ³ |z| f_e⁴ / 4
// (the first neglected term of the expansion [derived]; the exact value is
// used, it is the larger). For single-FFT Fresnel the same expression holds
// with f_e the angular content of the field (a wave of frequency f reaches
// x2 − x1 = λ z f, and π(x2−x1)⁴/(4λ|z|³) is the same number [derived by
// stationary phase]).
// Explicit methods run even outside their range, but make_propagator and
// PlaneStack then warn once (log::warn with a once_key per caller, method,
// explicit/auto, shape and grid — not distance — so a sweep over many
// distances warns once, with the first distance's numbers) with the
// numbers: angular_spectrum or fresnel beyond the critical distance
// (bandwidth kept), fresnel with Δφ > paraxial_tolerance, fresnel_single_fft
// with Δx > λ|z|/L (aliased input chirp: wrong, not just approximate) or
// Δφ > paraxial_tolerance. choose_method itself never logs.
#include "wavestack/core/grid.hpp"

#include <cstddef>
#include <optional>
#include <string>
#include <string_view>

namespace wavestack::propagate {

enum class Method { angular_spectrum, fresnel, fresnel_single_fft };

/// "angular-spectrum", "fresnel", "fresnel-single-fft" (the pipeline spelling).
const char* method_name(Method m) noexcept;
/// Inverse of method_name; "auto" gives nullopt in *out and returns true;
/// unknown text returns false.
bool parse_method(std::string_view text, std::optional<Method>* out);

/// Zero padding per axis: padded length = good_size(ceil(factor · n)).
struct Padding {
  enum class Mode {
    automatic, ///< auto_pad_factor() for the transfer-function methods, 1 for single-FFT
    none,      ///< factor 1: the propagation is circular (periodic fields)
    factor     ///< the given factor (>= 1)
  };
  Mode mode = Mode::automatic;
  double value = 1.0; ///< the factor when mode == factor

  static Padding automatic() { return {}; }
  static Padding none() { return {Mode::none, 1.0}; }
  static Padding of(double factor) { return {Mode::factor, factor}; }
};

struct PropagatorOptions {
  /// nullopt = auto (the criterion above); otherwise the method to use.
  std::optional<Method> method;
  /// Default automatic (see auto_pad_factor).
  Padding padding;
  /// Highest spatial frequency the field contains, cycles/m, in object space
  /// (e.g. NA/λ0 for a microscope with numerical aperture NA); 0 = the grid's
  /// Nyquist frequency. Used by auto padding and the paraxial error estimate.
  double max_frequency = 0.0;
  /// Largest acceptable paraxial phase error at the band edge (rad) before
  /// a Fresnel method counts as out of range. Default 0.1 rad (λ/63).
  double paraxial_tolerance = 0.1;
  /// Band limit of the transfer-function methods (off only for tests).
  bool band_limit = true;
};

/// The outcome of the criterion for one propagation.
struct MethodChoice {
  Method method = Method::angular_spectrum;
  /// One sentence with the numbers: pitch, critical pitch, distance, and what
  /// is lost or approximated (bandwidth kept, paraxial phase error).
  std::string reason;
  /// An explicitly requested method used outside its valid range.
  bool explicit_out_of_range = false;
  /// `auto` picked a method whose approximation is beyond tolerance
  /// (single-FFT Fresnel with paraxial error > paraxial_tolerance; a stack's
  /// band-limited angular spectrum beyond the critical distance); warned.
  bool auto_out_of_range = false;
  /// Padding factor used (after Padding::Mode is resolved).
  double pad_factor = 1.0;
  /// Critical pitches λ|z|/L: with the padded window (transfer functions)
  /// and the unpadded source window (single-FFT), per axis (m).
  double critical_dx_padded = 0, critical_dy_padded = 0;
  double critical_dx_source = 0, critical_dy_source = 0;
  /// Fraction of the bandwidth (per axis, the smaller) the band-limited
  /// transfer function keeps: u_limit over the band (Nyquist, max_frequency,
  /// and for the angular spectrum 1/λ, beyond which waves are evanescent),
  /// at most 1; 1 for single-FFT.
  double bandwidth_kept = 1.0;
  /// Paraxial phase error at the band edge (rad); 0 for angular_spectrum.
  double paraxial_error = 0.0;
};

/// Apply the criterion for an h×w field on `grid` over `distance` (m).
/// Throws Error(config) for bad sizes, pitches, wavelength, index, distance
/// or padding, and for fresnel_single_fft at distance 0. Pure: no logging.
MethodChoice choose_method(std::size_t h, std::size_t w, const Grid& grid, double distance,
                           const PropagatorOptions& options = {});

/// Padding factor that keeps the propagated field free of wrap-around in
/// the output window and the band limit's cut away from it [derived]:
///  * Spread: a field filling the window L = n·Δx spreads sideways by
///    a = |z| tan θ_max, θ_max the steepest wave present. θ_max along x is
///    that of the wave with the largest fx and, then, the largest |fy| the
///    band allows: fx = min(1/(2Δx), f_max), fy = min(1/(2Δy),
///    sqrt(f_max² − fx²)), tan θ = λ fx / sqrt(1 − λ²(fx² + fy²)) (infinite
///    when that wave is evanescent), f_max = max_frequency or no limit at 0.
///  * Wrap-around: with circular convolution on the padded period P the
///    spill past one edge re-enters at the far end of the padding; it stays
///    out of the cropped window [0, L) iff P >= L + a (a, not 2a: the spills
///    from the two edges may overlap each other, but only inside the
///    discarded padding).
///  * Band limit: it keeps waves that move at most P/2 sideways, so waves
///    moving more cannot wrap once P >= 2L, and waves moving more than L
///    cannot reach the window from anywhere in the source: P = 2L would do,
///    were the cut sharp in space. It is sharp in frequency, so in space the
///    kernel's truncation at P/2 has a soft edge a few Fresnel zones
///    s = sqrt(λ|z|) wide (ripple decaying like 1/distance); it must stay
///    clear of the offsets the window needs, min(a, L): P/2 >= min(a, L) + 2s.
///    (Measured on the Airy ring of a lens focus with s = 0.28 L: the ring
///    moves by 1.9e-3 at P = 2L, by 6e-5 at P = 4L.)
///  So P/L = max(1 + a/L, 2a/L + 4s/L) for a <= L, 2 + 4s/L for a > L (with
///  band_limit = false: 1 + a/L), the larger over the two axes, capped at 4
///  with a warning (log::warn, once per shape and grid). Returns 1 at
///  distance 0. Example: 1024² at 86.25 nm, n = 1.333, NA 0.75, z = 20 um:
///  a = 13.6 um, s = 3.1 um, factor 1.154, padded 1200. Cost: a few flops.
double auto_pad_factor(std::size_t h, std::size_t w, const Grid& grid, double distance,
                       double max_frequency = 0.0, bool band_limit = true);

/// Padded length used for length n and factor f: good_size(ceil(f·n)) >= n.
std::size_t padded_length(std::size_t n, double factor);

} // namespace wavestack::propagate
