#pragma once
// Simple line plots as PNG (e.g. a focus metric against distance): axes with
// round ticks, grid, labels, and an optional marked x position (the chosen
// focus). Text as in preview.hpp (Hershey font, "µ" and "π" drawn by hand).
#include <optional>
#include <span>
#include <string>

namespace wavestack::render {

struct PlotLayout {
  int width = 0, height = 0;                                ///< PNG size
  int plot_x = 0, plot_y = 0, plot_width = 0, plot_height = 0; ///< axes box
  double x_min = 0, x_max = 1, y_min = 0, y_max = 1;        ///< axis ranges
};

/// Plot ys against xs (same length, at least 1; NaN y values break the line)
/// and write a PNG to `path`. `marker_x`, when given, is drawn as a vertical
/// dashed line with a dot on the curve and its value printed. Error(internal)
/// for mismatched or empty inputs; Error(output) naming the path when the PNG
/// cannot be written.
PlotLayout write_curve_plot(const std::string& path, std::span<const double> xs, std::span<const double> ys,
                            const std::string& x_label, const std::string& y_label,
                            std::optional<double> marker_x = std::nullopt, const std::string& title = {});

} // namespace wavestack::render
