#pragma once
// Least-squares Zernike fit over a circular pupil of a pixel grid.
//
// Pixel and pupil coordinates: pixel (row, col) has its centre at (col, row)
// in pixel units. The pupil has centre (cx, cy) and radius R in pixels; a
// pixel belongs to it when its centre lies in the closed disk, and its pupil
// coordinates are
//   x = (col − cx) / R,
//   y = (cy − row) / R   with YAxis::up   (default: y grows towards row 0),
//   y = (row − cy) / R   with YAxis::down (y grows with the row index),
// with θ = atan2(y, x) counter-clockwise from +x (zernike.hpp). With the
// default, "vertical tilt" Z_1 = 2ρ sin θ is positive towards the top of a
// preview image (row 0 at the top) and the (x, y) frame is right-handed as
// seen on screen, as the ANSI standard draws the pupil. Choose YAxis::down
// to follow the row index instead (a mirror about x: the sign of every
// m < 0 term flips).
//
// The J = terms basis functions Z_0 .. Z_{J−1} are sampled once, at
// construction, on the pupil pixels and orthonormalised there by modified
// Gram–Schmidt in double (QR of the sampled basis: A = Q R); Q is kept in
// float. fit() then costs one pass over the pupil (J multiply-adds per
// pixel, double accumulators) plus a J×J solve, and allocates nothing.
// Discrete pixel sampling makes the Zernike terms slightly non-orthogonal
// on the pixel disk; the QR fit is the exact least-squares solution anyway,
// so a wavefront made of the first J terms is recovered to float round-off.
//
// Memory: 4·J bytes per pupil pixel kept (e.g. 49 MB for J = 15 on the
// inscribed disk of a 1024×1024 frame), 8·J bytes per pupil pixel
// transiently during construction.
#include "wavestack/core/image.hpp"

#include <cmath>
#include <cstddef>
#include <limits>
#include <memory>
#include <span>
#include <vector>

namespace wavestack::wavefront {

namespace detail {
class SampledBasis;
}

enum class YAxis {
  up,  ///< y = (cy − row)/R: y grows towards row 0 (default)
  down ///< y = (row − cy)/R: y grows with the row index
};

/// A circular pupil in pixel units. Any field left at its default is
/// resolved against the frame (see resolved_pupil()).
struct Pupil {
  /// Centre column; NaN (default) = frame centre (width − 1)/2.
  double cx = std::numeric_limits<double>::quiet_NaN();
  /// Centre row; NaN (default) = frame centre (height − 1)/2.
  double cy = std::numeric_limits<double>::quiet_NaN();
  /// Radius in pixels; <= 0 (default) = largest inscribed circle,
  /// min(height, width)/2, whose disk reaches the outer edges of the
  /// border pixels.
  double radius = 0.0;
};

/// The pupil with defaults filled in for an h×w frame. Throws Error(config)
/// when the result is not finite, the radius is not positive, or the disk
/// reaches more than half a pixel beyond the frame (pixel centres outside
/// the frame would be missing from the pupil and the fit would not be one
/// over a full disk).
Pupil resolved_pupil(std::size_t height, std::size_t width, const Pupil& pupil);

struct ZernikeFitOptions {
  /// Number of terms J: ANSI j = 0 .. J−1. 15 (default) = radial orders
  /// 0..4; 28 = orders 0..6 (ISO 24157 Annex E). Accepted: 1 ..
  /// terms_up_to_order(max_radial_order); the pupil must hold at least J
  /// pixels. Cost and memory grow linearly with J.
  int terms = 15;
  Pupil pupil;              ///< default: the largest inscribed circle
  YAxis y_axis = YAxis::up; ///< how rows map to pupil y (see above)
};

class ZernikeFit {
public:
  /// Plan a fit for h×w frames. Throws Error(config) for a zero size, a bad
  /// pupil (resolved_pupil) or J out of range / larger than the pupil pixel
  /// count. Cost: O(J²) per pupil pixel once (Gram–Schmidt).
  ZernikeFit(std::size_t height, std::size_t width, ZernikeFitOptions options = {});
  ~ZernikeFit();
  ZernikeFit(const ZernikeFit&);
  ZernikeFit& operator=(const ZernikeFit&);

  std::size_t height() const noexcept { return h_; }
  std::size_t width() const noexcept { return w_; }
  int terms() const noexcept { return J_; }
  const Pupil& pupil() const noexcept { return pupil_; } ///< resolved
  YAxis y_axis() const noexcept { return y_axis_; }
  std::size_t pupil_pixels() const noexcept;
  /// Pupil coordinates of a pixel centre (may lie outside the unit disk).
  double pupil_x(double col) const noexcept { return (col - pupil_.cx) / pupil_.radius; }
  double pupil_y(double row) const noexcept {
    return (y_axis_ == YAxis::up ? pupil_.cy - row : row - pupil_.cy) / pupil_.radius;
  }
  bool in_pupil(std::size_t row, std::size_t col) const noexcept;

  /// Scratch for one thread: J doubles.
  struct Workspace {
    std::vector<double> a;
  };
  Workspace make_workspace() const { return Workspace{std::vector<double>(static_cast<std::size_t>(J_))}; }

  /// Least-squares coefficients c_0..c_{J−1} of Σ c_j Z_j fitted to `data`
  /// (h×w, any stride) over the pupil pixels, in the units of `data`.
  /// `coefficients` must hold J values. Pixels outside the pupil are not
  /// read. Throws Error(input) when a pupil pixel is not finite (the fit
  /// would be undefined) and Error(config) for wrong sizes. Thread-safe with
  /// one workspace per thread; allocates nothing.
  void fit(ImageView<const float> data, std::span<double> coefficients, Workspace& ws) const;
  /// out = Σ c_j Z_j on the pupil pixels (others untouched).
  void synthesize(std::span<const double> coefficients, ImageView<float> out, Workspace& ws) const;
  /// out = in − Σ c_j Z_j on the pupil pixels (others untouched); in and out may alias.
  void subtract(ImageView<const float> in, std::span<const double> coefficients, ImageView<float> out,
                Workspace& ws) const;

private:
  friend class WavefrontAnalyzer;
  void check(ImageView<const float> v, std::size_t ncoef, const Workspace& ws) const;
  std::size_t h_, w_;
  int J_;
  Pupil pupil_;
  YAxis y_axis_;
  std::shared_ptr<const detail::SampledBasis> basis_;
};

} // namespace wavestack::wavefront
