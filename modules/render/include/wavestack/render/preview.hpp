#pragma once
// PNG previews of one image (phase, amplitude, OPD, ...): the data in a
// colormap, a colour bar with ticks and units beside it, a scale bar in µm on
// the image and a title above. Previews are for looking, not for measuring:
// the numbers live in the HDF5 output.
//
// Colormaps are OpenCV's (Debian OpenCV 4.6 has all of these): viridis and
// cividis are sequential and perceptually uniform (cividis also reads well
// with colour-vision deficiency); twilight and twilight_shifted are cyclic,
// for wrapped phase: the colours at both ends of the range agree, so a
// 2π jump is invisible. twilight is light at the ends and dark in the middle,
// twilight_shifted the reverse (light at 0 rad). gray is a plain ramp.
//
// NaN pixels are drawn as a grey hatch (not a colour of any of the maps) and
// the colour bar then shows a "no data" swatch. Text uses OpenCV's Hershey
// font; "µ" (U+00B5 or U+03BC), "π" and "−" in titles and units are drawn by
// hand since the font has ASCII only.
//
// Size: images smaller than `min_side` are enlarged by an integer factor
// (nearest neighbour, so pixels stay square and visible); images larger than
// `max_side` are reduced with area averaging (NaN-aware; nearest neighbour for
// cyclic maps, since averaging across a 2π wrap invents values).
#include "wavestack/core/image.hpp"

#include <cstdint>
#include <optional>
#include <string>
#include <string_view>
#include <utility>
#include <vector>

namespace wavestack::render {

enum class Colormap { viridis, cividis, twilight, twilight_shifted, gray };

/// True for the cyclic maps (twilight, twilight_shifted).
bool is_cyclic(Colormap map) noexcept;
std::string_view colormap_name(Colormap map) noexcept;

struct Rgb {
  std::uint8_t r = 0, g = 0, b = 0;
  bool operator==(const Rgb&) const = default;
};

/// Colour of the map at t in [0, 1] (clamped; NaN gives the no-data grey).
/// The map has 256 entries; t selects entry round(255 t).
Rgb colormap_color(Colormap map, double t);

/// The grey of NaN pixels (the lighter of the two hatch greys).
Rgb nodata_color() noexcept;

struct PreviewOptions {
  std::string title;  ///< drawn above the image; shrunk to fit, then shortened with "..."
  std::string units;  ///< colour bar units, e.g. "rad", "nm", "a.u.", "µm"; empty: none
  Colormap colormap = Colormap::viridis;
  /// Fixed value range, e.g. {-π, π} for wrapped phase. Without it the range
  /// is the robust range [low_percentile, high_percentile] of the finite values.
  std::optional<std::pair<double, double>> range;
  double low_percentile = 0.5;
  double high_percentile = 99.5;
  /// Object-space pixel pitch along columns (m) for the scale bar; 0 or
  /// negative: no scale bar.
  double pixel_pitch_m = 0.0;
  int min_side = 400;  ///< enlarge (integer factor) while the longer side is below this
  int max_side = 1024; ///< reduce when the longer side is above this
};

/// Where things ended up in the written PNG (pixels of the PNG).
struct PreviewLayout {
  int canvas_width = 0, canvas_height = 0;
  int image_x = 0, image_y = 0, image_width = 0, image_height = 0; ///< the data
  int bar_x = 0, bar_y = 0, bar_width = 0, bar_height = 0;         ///< colour bar (top = high)
  double zoom = 1.0;               ///< display pixels per data pixel
  double low = 0.0, high = 1.0;    ///< value range mapped to the colormap ends
  bool has_scale_bar = false;
  double scale_bar_m = 0.0;        ///< length of the scale bar (m)
  int scale_bar_px = 0;            ///< its length on the PNG
  bool has_nodata = false;         ///< some pixels were NaN
};

/// Render `data` and write it as PNG to `path`. Error(output) naming the path
/// when the folder does not exist or the PNG cannot be written;
/// Error(internal) for an empty image.
PreviewLayout write_preview(const std::string& path, ImageView<const float> data, const PreviewOptions& options);

/// The [low, high] percentiles (0-100) of the finite values, with numpy's
/// default linear interpolation between order statistics. Images of more
/// than 2^20 pixels are sampled on a regular grid of about 2^20 pixels.
/// Returns {0, 1} when no value is finite; widens a zero-width range.
std::pair<double, double> robust_range(ImageView<const float> data, double low_percentile = 0.5,
                                       double high_percentile = 99.5);

/// A round scale bar length for a field `field_width_m` wide: the value
/// among 1, 2, 5 × 10^k µm closest (in log scale) to a fifth of the width.
struct ScaleBar {
  double length_m = 0.0;
  std::string label; ///< e.g. "20 µm", "0.5 µm", "1 mm"
};
ScaleBar choose_scale_bar(double field_width_m);

/// About `target` round tick values (steps of 1, 2 or 5 × 10^k) within [lo, hi].
std::vector<double> nice_ticks(double lo, double hi, int target = 5);

/// Tick label for `value` on an axis whose ticks are `step` apart: as few
/// decimals as the step needs, scientific notation for very large/small.
std::string format_tick(double value, double step);

} // namespace wavestack::render
