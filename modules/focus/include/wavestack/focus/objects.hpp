#pragma once
// Per-object focus: find the objects of a frame and focus each one in its
// own bounding box.
//
// One sweep over the S coarse planes (one forward FFT, S inverse FFTs,
// parallel over planes) computes, per plane, the moments of the metric's
// pixel quantity on a grid of tiles (side = options.tile; per tile, its
// even and its odd blocks of the noise split, side options.search.split_tile) and
// the per-pixel maximum over the planes of the complex gradient energy
// |∇v|² — a map in which every object is sharp wherever its own focus lies.
// Then:
//  1. segmentation: the map is smoothed (Gaussian, smooth_px), thresholded
//     at median + threshold·1.4826·MAD (robust noise level [common
//     practice]) but at least median + min_contrast·(max - median), holes
//     are filled, and 8-connected components (OpenCV) of at least min_area
//     pixels are the objects (at most max_objects, the largest kept);
//  2. each object's box (bounding box + margin, clamped to the frame,
//     expanded outward to whole tiles) is its ROI; its focus curve is the
//     sum of its tiles' moments, judged as in search.hpp (the same
//     checkerboard split, summed over the box's tiles), and refined with 2·refine_levels extra inverse
//     FFTs of the whole frame, evaluating the metric on the box only;
//  3. the frame as a whole (options.frame_roi) gets the same treatment
//     (FocusResult `frame`).
// Cost: (S + 2·L·(objects + 1)) inverse FFTs per frame; memory S·tiles·48
// bytes for the tile moments (81 planes, 512x512, 8 px tiles: 16 MB).
//
// Only moment metrics (metric.hpp is_moment_metric) can be summed over
// tiles: spectral_energy is rejected with Error(config).
//
// Allocation: the result vectors keep their capacity; OpenCV's connected
// components allocate small internal buffers per call, so this path is not
// strictly allocation-free.
#include "wavestack/core/grid.hpp"
#include "wavestack/core/image.hpp"
#include "wavestack/focus/search.hpp"

#include <cstddef>
#include <memory>
#include <vector>

namespace wavestack::focus {

struct ObjectOptions {
  /// Metric, thresholds, padding, refinement (search.hpp); `roi` is ignored.
  SearchOptions search = {};
  /// Robust threshold in noise sigmas above the map's median (default 6). > 0.
  double threshold = 6.0;
  /// Lower bound of the threshold as a fraction of (max - median) of the
  /// smoothed map (default 0.05; matters for noise-free maps). In [0, 1).
  double min_contrast = 0.05;
  /// Gaussian sigma (pixels) of the map smoothing (default 2). >= 0 (0 = none).
  double smooth_px = 2.0;
  /// Smallest object (pixels of the filled segment, default 16). >= 1.
  std::size_t min_area = 16;
  /// Margin (pixels) added around each bounding box (default 8): room for
  /// the object's defocus blur within the box.
  std::size_t margin = 8;
  /// At most this many objects, the largest kept (default 64). >= 1.
  std::size_t max_objects = 64;
  /// Region scored for the frame as a whole (`frame` of ObjectTable);
  /// default the whole frame. Shrunk inward to whole tiles (at least one);
  /// Error(config) when it does not lie inside the frame. The
  /// pipeline leaves the frame border and what it spreads over the sweep
  /// out, as for a plain search.
  Roi frame_roi = {};
  /// Side (pixels) of the tiles the moments are kept on; boxes are whole
  /// tiles (default 8). Independent of the noise split's block side
  /// (search.split_tile), which may be smaller. >= 1.
  std::size_t tile = 8;
};

/// One row of the object table.
struct ObjectFocus {
  int id = 0;                     ///< 1.. in OpenCV label order (raster order of the first pixel)
  double centroid_y = 0, centroid_x = 0; ///< pixels, centroid of the segment (pixel (0,0) centre = 0)
  double centroid_y_m = 0, centroid_x_m = 0; ///< metres: pixel · pitch, same origin
  std::size_t area = 0;           ///< pixels of the filled segment (includes the map's blur)
  Roi box;                        ///< ROI the object was focused in
  double distance = 0;            ///< m; NaN when !sure
  double confidence = 0;
  bool sure = false;
  Unsure reason = Unsure::invalid;
  int sign = +1;
  double snr = 0;
};

/// Result of one frame. Buffers keep their capacity when reused.
struct ObjectTable {
  FocusResult frame;                ///< the whole frame (distances, curve: /focus/*)
  std::vector<ObjectFocus> objects; ///< one row per object
  std::vector<double> curves;       ///< objects.size() × S, row-major: each object's curve
};

class ObjectFocuser {
public:
  /// Plan for h×w frames over [from, to] with `step`. Error(config) as
  /// Search, for spectral_energy, and for options out of range.
  ObjectFocuser(std::size_t h, std::size_t w, const Grid& grid, double from, double to, double step,
                ObjectOptions options = {});
  ~ObjectFocuser();
  ObjectFocuser(ObjectFocuser&&) noexcept;
  ObjectFocuser& operator=(ObjectFocuser&&) noexcept;

  std::size_t planes() const noexcept;
  std::span<const double> distances() const noexcept;
  const ObjectOptions& options() const noexcept { return options_; }

  struct Impl;
  class Workspace {
  public:
    Workspace();
    ~Workspace();
    Workspace(Workspace&&) noexcept;
    Workspace& operator=(Workspace&&) noexcept;

  private:
    friend class ObjectFocuser;
    struct Data;
    std::unique_ptr<Data> d;
  };
  /// Make it in the TBB arena that runs the focuser (one slot per thread).
  Workspace make_workspace() const;

  /// Segment and focus the objects of `field` (h×w). Thread-safe with one
  /// workspace per concurrent call.
  void run(ImageView<const cfloat> field, ObjectTable& out, Workspace& ws) const;

private:
  ObjectOptions options_;
  std::unique_ptr<Impl> impl_;
};

} // namespace wavestack::focus
