#pragma once
// Internal drawing helpers of the render module: text in the Hershey font
// with the few non-ASCII symbols units need, and PNG writing with errors.
#include <opencv2/core.hpp>

#include <string>

namespace wavestack::render::detail {

struct Font {
  double scale = 0.5;
  int thickness = 1;
};

/// Width and height (cap height, above the baseline) of `text` in pixels.
cv::Size text_size(const std::string& utf8, const Font& font);

/// Draw `text` with its baseline starting at `origin`.
void draw_text(cv::Mat& canvas, const std::string& utf8, cv::Point origin, const Font& font, const cv::Scalar& colour);

/// Light text with a dark outline (readable on any image).
void draw_outlined_text(cv::Mat& canvas, const std::string& utf8, cv::Point origin, const Font& font);

/// Shrink `font` (down to `min_scale`) until `text` fits in `width` pixels;
/// if it still does not fit, shorten the text with "...". Returns the text.
std::string fit_text(const std::string& utf8, int width, Font& font, double min_scale);

/// Draw text rotated 90° counter-clockwise (reading bottom to top), its
/// left end (after rotation: bottom) at `bottom_left`.
void draw_vertical_text(cv::Mat& canvas, const std::string& utf8, cv::Point bottom_left, const Font& font,
                        const cv::Scalar& colour);

/// cv::imwrite with wavestack errors (Error(output) naming the path).
void write_png(const std::string& path, const cv::Mat& bgr);

inline const cv::Scalar ink(40, 40, 40);      ///< text and axes (BGR)
inline const cv::Scalar paper(255, 255, 255); ///< background

} // namespace wavestack::render::detail
