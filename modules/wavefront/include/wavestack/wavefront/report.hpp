#pragma once
// Wavefront report of one unwrapped phase map over a circular pupil.
//
// Wavefront: W = φ·λ0/(2π) (nm), φ the unwrapped phase in radians and λ0
// the vacuum wavelength; a positive phase is a positive optical path (the
// exp(+ikz) convention of REFERENCES.md), so W has the sign of the OPD.
//
// What is reported (all over the pupil pixels of zernike_fit.hpp):
//  * coefficients_nm[j]: least-squares Zernike coefficients of W, ANSI j =
//    0..J−1 (zernike.hpp: unit-RMS normalisation);
//  * pv_nm, rms_nm: peak-to-valley and RMS of the sampled W with the piston
//    (mean) removed — RMS = standard deviation over the pupil pixels;
//  * pv_no_tilt_nm, rms_no_tilt_nm: the same after removing the
//    least-squares plane (piston + both tilts, fitted on its own over the
//    pupil pixels): the smallest RMS any plane leaves, independent of J;
//  * modal_rms_nm = sqrt(Σ_{j>=1} c_j²) and modal_rms_no_tilt_nm =
//    sqrt(Σ_{j>=3} c_j²): the same two quantities from the coefficients by
//    orthonormality (REFERENCES.md "RMS, P–V" [derived]); they agree with
//    the sampled ones when the J terms capture W, and
//    fit_residual_rms_nm = RMS of W − Σ c_j Z_j says how far they do not;
//  * Strehl ratio from σ = 2π·rms_no_tilt_nm/λ0 (rad): tilt displaces the
//    image without lowering its peak, so it is excluded [common practice]:
//      strehl_marechal    = (1 − σ²/2)²   (0 once σ² >= 2, where the
//                                          quadratic form stops decreasing),
//      strehl_exponential = exp(−σ²)      (extended Maréchal),
//      strehl_direct      = |⟨exp(iΦ)⟩|²   over the pupil pixels, Φ the tilt-
//                                          removed phase (the definition;
//                                          NaN when direct_strehl is off);
//    strehl_reliable is false when strehl_exponential < strehl_validity
//    (0.6): Mahajan, JOSA 72(9), 1258 (1982), finds the Maréchal formula
//    within 10 % only while S > 0.6, so a pipeline should warn below it.
//
// Cost per frame: two passes over the pupil (J + ~12 flops per pixel, one
// float sin/cos pair per pixel for strehl_direct); allocates nothing once
// the report was made by make_report().
#include "wavestack/wavefront/zernike_fit.hpp"

#include <cstddef>
#include <vector>

namespace wavestack::wavefront {

/// (1 − σ²/2)², clamped to 0 for σ² >= 2. σ = phase RMS in radians.
double strehl_marechal(double sigma_rad) noexcept;
/// exp(−σ²).
double strehl_exponential(double sigma_rad) noexcept;

struct WavefrontOptions {
  /// Vacuum wavelength λ0 in metres (required, > 0).
  double wavelength = 0.0;
  /// Zernike terms J (>= 3 so that tilt is among them); default 15.
  int terms = 15;
  Pupil pupil;              ///< default: the largest inscribed circle
  YAxis y_axis = YAxis::up; ///< see zernike_fit.hpp
  /// Compute strehl_direct (one sin/cos per pupil pixel). Default on.
  bool direct_strehl = true;
  /// strehl_reliable threshold on strehl_exponential; default 0.6 (Mahajan 1982).
  double strehl_validity = 0.6;
};

struct WavefrontReport {
  std::vector<double> coefficients_nm; ///< ANSI j = 0..J−1
  double pv_nm = 0, rms_nm = 0;
  double pv_no_tilt_nm = 0, rms_no_tilt_nm = 0;
  double modal_rms_nm = 0, modal_rms_no_tilt_nm = 0;
  double fit_residual_rms_nm = 0;
  double sigma_rad = 0; ///< 2π·rms_no_tilt_nm/λ0
  double strehl_marechal = 0, strehl_exponential = 0, strehl_direct = 0;
  bool strehl_reliable = true;
  std::size_t pupil_pixels = 0;
};

class WavefrontAnalyzer {
public:
  /// Plan for h×w phase maps. Throws Error(config) for a non-positive
  /// wavelength, terms < 3 or the errors of ZernikeFit.
  WavefrontAnalyzer(std::size_t height, std::size_t width, WavefrontOptions options);

  const ZernikeFit& zernike() const noexcept { return fit_; }
  const WavefrontOptions& options() const noexcept { return opt_; }
  /// A report with its coefficient array sized, to be reused frame after frame.
  WavefrontReport make_report() const;

  struct Workspace {
    ZernikeFit::Workspace fit;
  };
  Workspace make_workspace() const { return {fit_.make_workspace()}; }

  /// Analyse one unwrapped phase map (radians, h×w, any stride; only pupil
  /// pixels are read). Throws Error(input) for non-finite pupil pixels.
  /// Thread-safe with one workspace per thread; allocates nothing when
  /// `report` came from make_report().
  void analyze(ImageView<const float> phase, WavefrontReport& report, Workspace& ws) const;

private:
  WavefrontOptions opt_;
  ZernikeFit fit_;
  double plane_L_[9]; ///< Cholesky factor of the pupil moments of (1, x, y)
};

} // namespace wavestack::wavefront
