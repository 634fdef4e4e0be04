#pragma once
// Numerical aberration compensation: fit a smooth surface to the phase of
// the object-free background and subtract it from the whole frame.
//
// Model (BackgroundOptions::model), in frame coordinates
//   x = (col − cx)/r,  y = (cy − row)/r  (YAxis::up, default; (row − cy)/r
//   with YAxis::down),  cx = (w−1)/2, cy = (h−1)/2, r = ½·hypot(w−1, h−1),
// so the four corner pixel centres lie on the unit circle:
//  * polynomial: the monomials x^a·y^b with a + b <= degree, ordered by
//    total degree and then by rising power of y (1, x, y, x², xy, y², ...);
//    degree 1 = piston + tilt, 2 = + curvature (defocus and both
//    astigmatisms), the default;
//  * zernike: the listed ANSI terms Z_j(x, y) (zernike.hpp), e.g.
//    {0, 1, 2, 4} for piston, tilts and defocus, on that circumscribed unit
//    circle by default, or on `zernike_pupil` (centre and radius in pixels,
//    x = (col − cx)/R, y = (cy − row)/R as in zernike_fit.hpp; pixels
//    outside it see the polynomials continued beyond ρ = 1). With
//    region = mask and a mask inside the pupil this is a Zernike fit over
//    an arbitrary part of the pupil (obscurations, invalid pixels).
// The coefficients returned per frame are those of these raw functions, in
// the units of the phase (rad): e.g. for the polynomial model, the tilt
// along columns in rad per pixel is coefficient[1]/r.
//
// Background region (BackgroundOptions::region):
//  * all: every finite pixel (allowed by `mask` when given);
//  * mask: exactly the pixels where `mask` is non-zero (and finite);
//  * automatic (default): objects are found and excluded, iteratively:
//     0. candidates C = finite pixels allowed by `mask` (all when empty);
//        when an amplitude image is passed, pixels whose amplitude deviates
//        from its median over C by more than amplitude_sigmas·σ_A are
//        objects from the start (σ = 1.4826·MAD, the normal-consistent
//        robust standard deviation [common practice]; deviations below
//        0.1 % of the median amplitude never count);
//     1. fit the model over the current background B (first: C minus the
//        amplitude objects) and form the residual r = φ − fit;
//     2. over B: median and σ of r, median and σ of |∇r| (central
//        differences, one-sided at the frame edge); a pixel is an object
//        when |r − med| > max(phase_sigmas·σ_r, phase_floor) or
//        |∇r| > med + max(gradient_sigmas·σ_g, gradient_floor); dilate the
//        objects by `dilation` pixels (square window) to drop their rims;
//     3. B = C minus the dilated objects; repeat from 1 `iterations` times
//        (default 3), then fit once more over the final B.
//    The level test catches the flat interior of large objects, the
//    gradient test their edges; the first fit includes the objects, which
//    biases it, the later ones do not. Statistics use at most 16384
//    evenly spread pixels of B. When B would fall below
//    min_background_fraction of C, the previous B is kept, the iteration
//    stops, BackgroundFit::fell_back is set and a warning is logged once.
//
// Fitting: the raw functions are sampled once per frame shape and
// orthonormalised over the whole frame by modified Gram–Schmidt (QR, in
// double; Q kept in float). Per frame, the Gram matrix of Q over B (J×J,
// double) is accumulated over whichever of B or its complement is smaller
// (the full-frame Gram matrix is known) and solved by Cholesky: J²/2
// multiply-adds per pixel of the smaller set plus J per pixel for the
// residual. The whole frame is then corrected: out = φ − fit. Non-finite
// input pixels stay non-finite and are never background.
//
// Memory: 4·J bytes per frame pixel for Q (24 MB for degree 2 at
// 1024×1024); the workspace holds two float and four byte images of the
// frame size.
#include "wavestack/core/image.hpp"
#include "wavestack/wavefront/zernike_fit.hpp"

#include <cstddef>
#include <cstdint>
#include <memory>
#include <span>
#include <string>
#include <vector>

namespace wavestack::wavefront {

enum class BackgroundModel { polynomial, zernike };
enum class BackgroundRegion { automatic, mask, all };

struct BackgroundOptions {
  BackgroundModel model = BackgroundModel::polynomial;
  /// Polynomial total degree, 0..8 ((degree+1)(degree+2)/2 terms). Default 2.
  int degree = 2;
  /// ANSI indices for the zernike model (distinct, >= 0); default piston,
  /// tilts, astigmatisms and defocus (the same span as degree 2).
  std::vector<int> zernike_terms = {0, 1, 2, 3, 4, 5};
  /// Pupil of the zernike model: fields left at their defaults mean the
  /// frame centre and the circumscribed radius ½·hypot(w−1, h−1). Any
  /// finite positive radius is accepted (the pupil may extend beyond the frame).
  Pupil zernike_pupil;
  YAxis y_axis = YAxis::up;
  BackgroundRegion region = BackgroundRegion::automatic;
  /// h×w, non-zero = may be background (automatic, all) or is background
  /// (mask; required there). Empty = every pixel.
  Image<std::uint8_t> mask;
  // --- automatic detection --------------------------------------------
  int iterations = 3;            ///< refinement passes, 0..20
  double phase_sigmas = 4.0;     ///< level threshold in robust σ (> 0)
  double gradient_sigmas = 4.0;  ///< |∇r| threshold in robust σ above the median (> 0)
  double amplitude_sigmas = 4.0; ///< amplitude threshold in robust σ (> 0)
  double phase_floor = 0.02;     ///< rad; smallest level deviation that counts (>= 0)
  double gradient_floor = 0.02;  ///< rad/pixel; smallest gradient excess that counts (>= 0)
  int dilation = 3;              ///< pixels added around each object, 0..64
  double min_background_fraction = 0.1; ///< of the candidates, (0, 1)
};

/// What one apply() did.
struct BackgroundFit {
  std::size_t background_pixels = 0; ///< pixels of the final fit
  double residual_rms = 0;           ///< RMS of φ − fit over them (rad)
  int iterations = 0;                ///< refinement passes run
  bool fell_back = false;            ///< see min_background_fraction
};

class BackgroundCompensator {
public:
  /// Plan for h×w frames (h, w >= 2). Throws Error(config) for bad options
  /// (ranges above, mask of another size, mask region without a mask).
  /// Cost: O(J²) per pixel once.
  BackgroundCompensator(std::size_t height, std::size_t width, BackgroundOptions options = {});
  ~BackgroundCompensator();
  BackgroundCompensator(const BackgroundCompensator&);
  BackgroundCompensator& operator=(const BackgroundCompensator&);

  std::size_t height() const noexcept { return h_; }
  std::size_t width() const noexcept { return w_; }
  /// Number of fitted coefficients J.
  int terms() const noexcept { return J_; }
  /// Readable name of coefficient k: "1", "x", "x^2 y", ... or "Z4 defocus".
  std::string term_name(int k) const;
  /// r of the frame coordinates (pixels).
  double coordinate_scale() const noexcept { return scale_; }
  /// The pupil the zernike model uses (resolved); the frame circle for the polynomial model.
  const Pupil& zernike_pupil() const noexcept { return zpupil_; }
  const BackgroundOptions& options() const noexcept { return opt_; }

  struct Workspace {
    Image<float> residual, gradient;
    Image<std::uint8_t> candidates, background, objects, dilated;
    std::vector<float> sample;
    std::vector<int> counts;
    std::vector<double> gram, factor, rhs, full;
  };
  Workspace make_workspace() const;

  /// Fit the background of `phase` (rad, h×w, unwrapped) and write
  /// out = phase − fit for every pixel; `out` may alias `phase`.
  /// `amplitude` (h×w) is optional (pass an empty view): it only helps the
  /// automatic detection. `coefficients` receives J values. After the call
  /// ws.background holds the final background mask (1 = used). Throws
  /// Error(input) when fewer background pixels than terms remain or the
  /// fit is degenerate on them. Thread-safe with one workspace per thread;
  /// allocates nothing.
  BackgroundFit apply(ImageView<const float> phase, ImageView<const float> amplitude, ImageView<float> out,
                      std::span<double> coefficients, Workspace& ws) const;

  /// out = Σ c_k f_k: the background surface of given coefficients.
  void evaluate(std::span<const double> coefficients, ImageView<float> out, Workspace& ws) const;

private:
  struct Impl;
  std::size_t h_, w_;
  int J_;
  double scale_;
  Pupil zpupil_;
  BackgroundOptions opt_;
  std::shared_ptr<const Impl> impl_;
};

} // namespace wavestack::wavefront
