#pragma once
// Objects on an OPD map: segmentation, per-object table, dry mass.
//
// analyze() runs, on one OPD map in nm (h×w, float):
//  1. Frame statistics over the finite pixels (at most 65536 evenly spread
//     samples): median b0 and robust σ = 1.4826·MAD (normal-consistent
//     [common practice]), iterated with 3σ clipping around the median (up
//     to 5 passes) so that objects covering a good part of the frame do not
//     inflate σ: the first pass sees objects and background, the later
//     ones mostly background (3σ clipping of a normal sample lowers its
//     MAD-based σ by ~0.3 %). Objects are assumed to
//     cover less than half of the frame and to have positive OPD (denser
//     than the medium).
//  2. Threshold level T (an OPD value in nm); a pixel is object when
//     OPD > T:
//       robust (default): T = b0' + robust_sigmas·σ,
//       fixed:            T = b0' + threshold_nm,
//       otsu:             T from Otsu's method on a 256-bin histogram of
//                         the finite pixels between their minimum and
//                         maximum (N. Otsu, IEEE Trans. SMC 9(1), 62
//                         (1979); bin centres, threshold = centre of the
//                         last bin of the lower class, as
//                         skimage.filters.threshold_otsu),
//     with b0' = b0 when subtract_background is on, 0 otherwise.
//  3. Optional hole filling: non-object pixels that the frame border cannot
//     reach through non-object pixels become object (background
//     connectivity is the complement of `connectivity`: 4 for 8-connected
//     objects, 8 for 4-connected ones).
//  4. Connected components (union–find, `connectivity` 4 or 8), numbered
//     1.. in the raster order of their first pixel; components smaller
//     than min_area_pixels or min_area (m²), and with exclude_border those
//     touching the frame edge, are dropped and the rest renumbered in the
//     same order.
//  5. Background level b: median of the finite non-object pixels farther
//     than background_margin pixels (square window) from every object
//     (subtract_background; else b = 0). Object statistics use OPD − b.
//  6. Per object: area, centroid (unweighted and OPD-weighted), mean and
//     peak OPD − b, the integral ∬(OPD − b) dA, and the dry mass
//       m = (1/α) ∬ OPD dA = λ0/(2πα) ∬ φ dA
//     (Barer, Nature 169, 366 (1952); Popescu et al., Am. J. Physiol. Cell
//     Physiol. 295(2), C538 (2008)), valid when the medium has the index of
//     the cell's water (REFERENCES.md "Quantitative phase and dry mass").
//
// Units: OPD in nm; areas in µm²; ∬OPD dA in µm³ (nm·1e-3 × µm²); α in
// µm³/pg (= mL/g = cm³/g), so the mass is in pg. Positions: pixel (row,
// col) has its centre at col·dx, row·dy metres from the centre of pixel
// (0, 0) — x along columns, y along rows (down), as stored.
//
// Workspaces: analyze() allocates nothing once the workspace and table have
// seen as many components as the current frame has (vectors keep their
// capacity); const, thread-safe with one workspace per thread.
#include "wavestack/core/grid.hpp"
#include "wavestack/core/image.hpp"

#include <cstddef>
#include <cstdint>
#include <vector>

namespace wavestack::quantify {

enum class ThresholdMode { robust, fixed, otsu };

struct ObjectOptions {
  ThresholdMode threshold = ThresholdMode::robust;
  double robust_sigmas = 5.0;  ///< robust: T = b0 + k·σ; k > 0
  double threshold_nm = 20.0;  ///< fixed: T = b0 + this (nm, finite)
  int connectivity = 8;        ///< 4 or 8
  std::size_t min_area_pixels = 20; ///< drop smaller components (pixels)
  double min_area = 0.0;       ///< and smaller than this area (m²); 0 = off
  bool fill_holes = false;     ///< fill enclosed non-object pixels
  bool exclude_border = false; ///< drop objects touching the frame edge
  bool subtract_background = true; ///< measure OPD relative to the background median
  int background_margin = 3;   ///< pixels around objects kept out of the background median, 0..64
  /// Specific refraction increment α in µm³/pg (= mL/g). Default 0.19, the
  /// middle of the commonly used 0.18–0.20 (REFERENCES.md [from memory]:
  /// 0.18 Barer & Joseph 1954, 0.2 Popescu 2008); accepted (0, 1).
  double alpha = 0.19;
};

struct ObjectRecord {
  int id = 0;                        ///< label 1.. (ws.labels)
  std::size_t area_pixels = 0;
  double area_um2 = 0;
  double centroid_col = 0, centroid_row = 0;           ///< pixels (unweighted)
  double centroid_x_m = 0, centroid_y_m = 0;           ///< col·dx, row·dy
  double mass_centroid_col = 0, mass_centroid_row = 0; ///< weighted by OPD − b (pixels)
  double mean_opd_nm = 0, peak_opd_nm = 0;             ///< of OPD − b
  double opd_integral_um3 = 0;                         ///< ∬(OPD − b) dA
  double dry_mass_pg = 0;                              ///< opd_integral_um3/α
  std::size_t col0 = 0, row0 = 0, col1 = 0, row1 = 0;  ///< bounding box [col0, col1) × [row0, row1)
  bool touches_border = false;
};

struct ObjectTable {
  double frame_median_nm = 0;  ///< b0
  double noise_sigma_nm = 0;   ///< robust σ of the frame
  double threshold_nm = 0;     ///< T (absolute OPD level)
  double background_nm = 0;    ///< b (0 when subtract_background is off)
  std::size_t background_pixels = 0; ///< pixels behind b
  std::size_t rejected = 0;    ///< components dropped by area / border
  std::vector<ObjectRecord> objects;
};

class ObjectAnalyzer {
public:
  /// Plan for h×w OPD maps on `grid` (grid.dy, grid.dx > 0 in metres; the
  /// wavelength is not needed: the map is already OPD). Throws
  /// Error(config) for bad sizes or options.
  ObjectAnalyzer(std::size_t height, std::size_t width, const Grid& grid, ObjectOptions options = {});

  const ObjectOptions& options() const noexcept { return opt_; }
  /// Pixel area in µm².
  double pixel_area_um2() const noexcept { return pixel_area_um2_; }

  struct Accum {
    std::size_t n;
    double sc, sr, so, soc, sor, omax;
    std::size_t c0, r0, c1, r1;
    bool border;
  };
  struct Workspace {
    Image<std::int32_t> labels; ///< after analyze(): 0 background, k = objects[k−1]
    Image<std::uint8_t> mask, tmp, near;
    std::vector<std::int32_t> parent, remap;
    std::vector<std::uint32_t> stack;
    std::vector<float> sample, scratch;
    std::vector<int> counts;
    std::vector<std::uint64_t> histogram;
    std::vector<Accum> acc;
  };
  Workspace make_workspace() const;

  /// Segment and measure one OPD map (nm, h×w, any stride). Non-finite
  /// pixels are never object nor background. Throws Error(input) when the
  /// map has no finite pixel, Error(config) for a wrong shape.
  void analyze(ImageView<const float> opd_nm, ObjectTable& table, Workspace& ws) const;

private:
  std::size_t h_, w_;
  Grid grid_;
  ObjectOptions opt_;
  double pixel_area_um2_;
};

/// Otsu threshold of the finite values of `img` on a `bins`-bin histogram
/// between their min and max (see step 2 above); `hist` is scratch
/// (resized to bins). Returns the minimum when all values are equal.
/// Throws Error(input) when no value is finite.
double otsu_threshold(ImageView<const float> img, std::vector<std::uint64_t>& hist, int bins = 256);

} // namespace wavestack::quantify
