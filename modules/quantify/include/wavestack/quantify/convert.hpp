#pragma once
// Phase to optical path difference and height.
//
//   OPD = φ·λ0/(2π)                  (nm; φ unwrapped, rad; λ0 vacuum)
//   h   = OPD/Δn                     transmission, Δn = n_object − n_medium
//   h   = s·OPD/2                    reflection (the light crosses the
//                                    height difference twice)
//
// Sign conventions. A positive phase is a positive extra optical path: with
// the exp(+ikz) convention of REFERENCES.md ("Conventions") a wave that
// crosses a thickness t of index n_object instead of n_medium gains
// φ = (2π/λ0)(n_object − n_medium)·t, so a cell denser than its medium has
// OPD > 0 and, with Δn > 0, h > 0. In reflection, a surface point that lies
// a distance d farther from the objective lengthens the round trip by 2d:
// with s = +1 (default) h is that depth, positive away from the objective;
// with `toward_objective` (s = −1) h is positive towards the objective, as a
// profilometer reports a bump. Whether a given instrument records +φ or −φ
// for the same object also depends on the sideband order chosen (the −1
// order is the complex conjugate), so verify the sign once on a known step.
//
// Cost: one multiply per pixel; no allocation; const and thread-safe.
#include "wavestack/core/image.hpp"

namespace wavestack::quantify {

enum class Quantity {
  opd,                 ///< OPD in nm (default)
  height_transmission, ///< h = OPD/Δn in nm
  height_reflection    ///< h = ±OPD/2 in nm
};

/// nm of OPD per radian of phase: λ0[nm]/(2π). Throws Error(config) for a
/// non-positive or non-finite wavelength (metres).
double nm_per_radian(double wavelength);

struct ConversionOptions {
  Quantity quantity = Quantity::opd;
  double wavelength = 0.0;       ///< vacuum wavelength in metres (required, > 0)
  double index_difference = 0.0; ///< Δn for height_transmission (non-zero, finite; may be < 0)
  bool toward_objective = false; ///< height_reflection: s = −1 (see above)
};

class PhaseConverter {
public:
  /// Throws Error(config) for a bad wavelength, or Δn = 0 with height_transmission.
  explicit PhaseConverter(ConversionOptions options);
  /// Output nm per input radian.
  double scale() const noexcept { return scale_; }
  const ConversionOptions& options() const noexcept { return opt_; }
  /// out = scale·phase, same shape (any strides; may alias). Non-finite
  /// pixels stay non-finite. Throws Error(config) for mismatched shapes.
  void apply(ImageView<const float> phase, ImageView<float> out) const;

private:
  ConversionOptions opt_;
  double scale_;
};

/// OPD (nm) to height (nm) in transmission: out = opd/Δn.
void opd_to_height_transmission(ImageView<const float> opd_nm, double index_difference, ImageView<float> out);
/// OPD (nm) to height (nm) in reflection: out = s·opd/2.
void opd_to_height_reflection(ImageView<const float> opd_nm, ImageView<float> out, bool toward_objective = false);

} // namespace wavestack::quantify
