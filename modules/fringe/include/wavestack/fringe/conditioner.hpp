#pragma once
// Hologram conditioning before the carrier search and demodulation.
//
// Conditioner::apply() runs, in this order, on one frame in place:
//  1. background normalisation (when a background hologram was given):
//       I'(y,x) = I(y,x) / max(B(y,x), background_epsilon * mean(B)),
//     which flattens the illumination envelope so that the zero order stays
//     compact. The clamp keeps dark or dead background pixels from blowing up.
//  2. DC suppression:
//       none  - nothing;
//       mean  - subtract the frame mean (accumulated in double);
//       local - subtract the local mean of a k×k box (k odd) centred on each
//               pixel, computed separably with running sums (O(1) per pixel).
//               The frame is extended beyond its border by half-sample
//               symmetric reflection (d c b a | a b c d | d c b a), which is
//               scipy.ndimage's mode "reflect"; windows wider than the frame
//               keep reflecting (period 2n), exactly as scipy does.
//  3. Tukey window (optional): multiply by w(y)·w(x), the outer product of
//     1-D tapered-cosine windows (Harris, Proc. IEEE 66(1) 51 (1978)):
//       u = i/(n-1) in [0,1], α = tukey_alpha,
//       w = ½[1 + cos(π(2u/α − 1))]          for u <  α/2,
//       w = 1                                 for α/2 <= u <= 1 − α/2,
//       w = ½[1 + cos(π(2u/α − 2/α + 1))]    for u >  1 − α/2,
//     α = 0 is the rectangular window, α = 1 the Hann window. This is the
//     definition of scipy.signal.windows.tukey(n, α) (sym=True).
//
// Everything that depends only on sizes and options (background reciprocal,
// window tables, reflection index tables) is computed at construction;
// apply() allocates nothing and touches only the frame and the Workspace.
// apply() is const and may run concurrently on different frames, one
// Workspace per thread.
#include "wavestack/core/image.hpp"

#include <cstddef>
#include <cstdint>
#include <vector>

namespace wavestack::fringe {

enum class DcMode {
  none,  ///< keep the zero order as recorded
  mean,  ///< subtract the frame mean (default)
  local  ///< subtract a box-filtered local mean (removes slow illumination drifts)
};

/// Relative clamp of the background: pixels darker than this fraction of the
/// background mean are treated as this fraction of the mean.
inline constexpr double background_epsilon = 1e-3;

struct ConditionerOptions {
  DcMode dc = DcMode::mean;
  /// Apply a Tukey window after DC removal. Off by default (DESIGN.md: a
  /// window changes the field near the frame edges; users opt in).
  bool tukey = false;
  /// Fraction of each axis length inside the cosine taper (α/2 at each end),
  /// Harris 1978 / scipy definition. Accepted: [0, 1]. 0.1 tapers 5 % of the
  /// rows at the top, 5 % at the bottom, and the same for the columns.
  double tukey_alpha = 0.1;
  /// Box size k (pixels, odd, >= 1) for DcMode::local; 0 = automatic:
  /// the smallest odd k >= 4·fringe_period when fringe_period > 0 (the box
  /// then spans several fringes, so it averages them out), else the odd
  /// number nearest to min(h, w)/32 (at least 3). Automatic sizes never
  /// exceed the smaller frame side.
  int local_window = 0;
  /// Fringe period in pixels, when known (e.g. from a previous carrier
  /// search); only used to choose the automatic local_window. 0 = unknown.
  double fringe_period = 0.0;
};

class Conditioner {
public:
  /// Plan the conditioning of h×w frames. `background` is optional (nullptr =
  /// none) and must be h×w: a different size throws Error(input) naming both
  /// sizes; a background whose mean is not positive and finite throws
  /// Error(input). Bad options (alpha outside [0,1], an even or negative
  /// local_window, zero sizes) throw Error(config).
  Conditioner(std::size_t h, std::size_t w, ConditionerOptions options = {},
              const Image<float>* background = nullptr);

  std::size_t height() const noexcept { return h_; }
  std::size_t width() const noexcept { return w_; }
  const ConditionerOptions& options() const noexcept { return opt_; }
  /// Box size actually used for DcMode::local (0 for the other modes).
  int local_window() const noexcept { return k_; }
  bool has_background() const noexcept { return !inv_background_.empty(); }
  /// The 1-D Tukey windows along rows (length h) and columns (length w);
  /// empty when the window is off.
  const std::vector<float>& window_y() const noexcept { return win_y_; }
  const std::vector<float>& window_x() const noexcept { return win_x_; }

  /// Scratch for one thread (sized here, never resized by apply()).
  struct Workspace {
    Image<float> row_mean;      ///< h×w horizontal box means (local mode only)
    std::vector<double> column; ///< w running column sums (local mode only)
  };
  Workspace make_workspace() const;

  /// Condition one h×w frame in place (any stride). A frame of another size
  /// throws Error(input). Non-finite pixels propagate; check frame_stats()
  /// first if the data may contain them.
  void apply(ImageView<float> hologram, Workspace& ws) const;

private:
  void subtract_local_mean(ImageView<float> img, Workspace& ws) const;

  std::size_t h_, w_;
  ConditionerOptions opt_;
  int k_ = 0;
  Image<float> inv_background_;         ///< 1 / clamped background, h×w
  std::vector<float> win_y_, win_x_;    ///< Tukey tables
  // Reflection tables for the running box sums: for output position i the
  // sum gains sample add[i] and loses sample sub[i] when moving to i+1;
  // first[] lists the k samples of the window at position 0.
  std::vector<std::uint32_t> add_x_, sub_x_, first_x_;
  std::vector<std::uint32_t> add_y_, sub_y_, first_y_;
};

/// Tukey window value table of length n (Harris 1978 definition, see above).
std::vector<double> tukey_window(std::size_t n, double alpha);

/// Per-frame statistics for warnings before processing.
struct FrameStats {
  float min = 0, max = 0;       ///< over finite pixels (0 when there are none)
  double mean = 0;              ///< over finite pixels
  double saturated_fraction = 0;///< fraction of all pixels >= saturation level (+Inf counts, NaN does not)
  std::size_t nonfinite = 0;    ///< NaN and ±Inf pixels
  std::size_t count = 0;        ///< number of pixels
};

/// Statistics of one frame. A pixel is saturated when value >= saturation_level;
/// saturation_level <= 0 disables the saturation count.
FrameStats frame_stats(ImageView<const float> frame, float saturation_level);

} // namespace wavestack::fringe
