#include "wavestack/render/plot.hpp"

#include "draw.hpp"
#include "wavestack/core/error.hpp"
#include "wavestack/render/preview.hpp"

#include <opencv2/imgproc.hpp>

#include <algorithm>
#include <cmath>
#include <limits>

namespace wavestack::render {

using detail::Font;

namespace {

/// Axis range covering [lo, hi] with a little air, widened when flat.
std::pair<double, double> axis_range(double lo, double hi, bool pad) {
  if (!(hi > lo)) {
    const double d = lo == 0 ? 1.0 : 0.1 * std::abs(lo);
    return {lo - d, hi + d};
  }
  const double air = pad ? 0.05 * (hi - lo) : 0.0;
  return {lo - air, hi + air};
}

double tick_step(const std::vector<double>& t, double lo, double hi) { return t.size() > 1 ? t[1] - t[0] : hi - lo; }

} // namespace

PlotLayout write_curve_plot(const std::string& path, std::span<const double> xs, std::span<const double> ys,
                            const std::string& x_label, const std::string& y_label, std::optional<double> marker_x,
                            const std::string& title) {
  ErrorContext ctx;
  ctx.file = path;
  if (xs.size() != ys.size() || xs.empty())
    fail_internal("write_curve_plot: " + std::to_string(xs.size()) + " x values and " + std::to_string(ys.size()) +
                      " y values",
                  ctx);
  double xmin = std::numeric_limits<double>::infinity(), xmax = -xmin, ymin = xmin, ymax = -xmin;
  for (std::size_t i = 0; i < xs.size(); ++i) {
    if (std::isfinite(xs[i])) {
      xmin = std::min(xmin, xs[i]);
      xmax = std::max(xmax, xs[i]);
    }
    if (std::isfinite(xs[i]) && std::isfinite(ys[i])) {
      ymin = std::min(ymin, ys[i]);
      ymax = std::max(ymax, ys[i]);
    }
  }
  if (!std::isfinite(xmin)) xmin = 0, xmax = 1;
  if (!std::isfinite(ymin)) ymin = 0, ymax = 1;

  PlotLayout L;
  std::tie(L.x_min, L.x_max) = axis_range(xmin, xmax, false);
  std::tie(L.y_min, L.y_max) = axis_range(ymin, ymax, true);
  const auto xt = nice_ticks(L.x_min, L.x_max, 6), yt = nice_ticks(L.y_min, L.y_max, 5);
  const double xstep = tick_step(xt, L.x_min, L.x_max), ystep = tick_step(yt, L.y_min, L.y_max);

  Font tick_font{0.45, 1}, label_font{0.5, 1}, title_font{0.6, 1};
  const int tick_h = detail::text_size("0", tick_font).height;
  int ytick_w = 0;
  for (double v : yt) ytick_w = std::max(ytick_w, detail::text_size(format_tick(v, ystep), tick_font).width);
  const int label_h = detail::text_size("H", label_font).height;

  L.width = 720;
  L.height = 440;
  const int top = title.empty() ? 24 : 24 + detail::text_size("H", title_font).height + 12;
  const int left = 16 + label_h + 14 + ytick_w + 8;
  const int bottom = 16 + label_h + 14 + tick_h + 10;
  L.plot_x = left;
  L.plot_y = top;
  L.plot_width = L.width - left - 24;
  L.plot_height = L.height - top - bottom;
  cv::Mat canvas(L.height, L.width, CV_8UC3, detail::paper);

  auto px = [&](double x) {
    return L.plot_x + static_cast<int>(std::lround((x - L.x_min) / (L.x_max - L.x_min) * (L.plot_width - 1)));
  };
  auto py = [&](double y) {
    return L.plot_y + static_cast<int>(std::lround((L.y_max - y) / (L.y_max - L.y_min) * (L.plot_height - 1)));
  };

  // grid, ticks and tick labels
  const cv::Scalar grid(225, 225, 225);
  for (double v : xt) {
    const int x = px(v);
    cv::line(canvas, {x, L.plot_y}, {x, L.plot_y + L.plot_height - 1}, grid, 1);
    cv::line(canvas, {x, L.plot_y + L.plot_height}, {x, L.plot_y + L.plot_height + 4}, detail::ink, 1);
    const std::string s = format_tick(v, xstep);
    const int w = detail::text_size(s, tick_font).width;
    detail::draw_text(canvas, s, {x - w / 2, L.plot_y + L.plot_height + 8 + tick_h}, tick_font, detail::ink);
  }
  for (double v : yt) {
    const int y = py(v);
    cv::line(canvas, {L.plot_x, y}, {L.plot_x + L.plot_width - 1, y}, grid, 1);
    cv::line(canvas, {L.plot_x - 5, y}, {L.plot_x - 1, y}, detail::ink, 1);
    const std::string s = format_tick(v, ystep);
    const int w = detail::text_size(s, tick_font).width;
    detail::draw_text(canvas, s, {L.plot_x - 8 - w, y + tick_h / 2}, tick_font, detail::ink);
  }
  cv::rectangle(canvas, {L.plot_x - 1, L.plot_y - 1, L.plot_width + 2, L.plot_height + 2}, detail::ink, 1);

  // axis labels and title
  {
    Font f = label_font;
    const std::string s = detail::fit_text(x_label, L.plot_width, f, 0.35);
    const int w = detail::text_size(s, f).width;
    detail::draw_text(canvas, s, {L.plot_x + (L.plot_width - w) / 2, L.height - 16}, f, detail::ink);
  }
  {
    Font f = label_font;
    const std::string s = detail::fit_text(y_label, L.plot_height, f, 0.35);
    const int w = detail::text_size(s, f).width;
    detail::draw_vertical_text(canvas, s, {16 + label_h, L.plot_y + (L.plot_height + w) / 2}, f, detail::ink);
  }
  if (!title.empty()) {
    Font f = title_font;
    const std::string s = detail::fit_text(title, L.width - 32, f, 0.4);
    detail::draw_text(canvas, s, {L.plot_x, 20 + detail::text_size("H", title_font).height}, f, detail::ink);
  }

  // the curve, clipped to the axes box; NaN breaks it
  const cv::Scalar line_colour(150, 90, 20); // dark blue (BGR)
  cv::Mat plot_area = canvas(cv::Rect(L.plot_x, L.plot_y, L.plot_width, L.plot_height));
  const cv::Point shift(-L.plot_x, -L.plot_y);
  bool have_prev = false;
  cv::Point prev;
  for (std::size_t i = 0; i < xs.size(); ++i) {
    if (!std::isfinite(xs[i]) || !std::isfinite(ys[i])) {
      have_prev = false;
      continue;
    }
    const cv::Point p(px(xs[i]), py(ys[i]));
    if (have_prev) cv::line(plot_area, prev + shift, p + shift, line_colour, 2, cv::LINE_AA);
    if (xs.size() <= 80) cv::circle(plot_area, p + shift, 3, line_colour, cv::FILLED, cv::LINE_AA);
    prev = p;
    have_prev = true;
  }

  // marked x: dashed vertical line, dot on the curve (linear interpolation), value
  if (marker_x && std::isfinite(*marker_x) && *marker_x >= L.x_min && *marker_x <= L.x_max) {
    const cv::Scalar mark(40, 80, 220); // orange-red (BGR)
    const int x = px(*marker_x);
    for (int y = L.plot_y; y < L.plot_y + L.plot_height; y += 10)
      cv::line(canvas, {x, y}, {x, std::min(y + 5, L.plot_y + L.plot_height - 1)}, mark, 2);
    double best_y = std::numeric_limits<double>::quiet_NaN();
    for (std::size_t i = 0; i + 1 < xs.size() && std::isnan(best_y); ++i) {
      const double a = xs[i], b = xs[i + 1];
      if (std::isfinite(ys[i]) && std::isfinite(ys[i + 1]) && std::min(a, b) <= *marker_x && *marker_x <= std::max(a, b))
        best_y = a == b ? ys[i] : ys[i] + (*marker_x - a) / (b - a) * (ys[i + 1] - ys[i]);
    }
    if (xs.size() == 1 && std::isfinite(ys[0])) best_y = ys[0];
    if (std::isfinite(best_y)) cv::circle(canvas, {x, py(best_y)}, 6, mark, 2, cv::LINE_AA);
    const std::string s = format_tick(*marker_x, xstep / 10);
    const int w = detail::text_size(s, tick_font).width;
    // label inside the box beside the line, at the top or the bottom,
    // whichever is away from the curve at the marker
    const bool curve_high = std::isfinite(best_y) && best_y > (L.y_min + L.y_max) / 2;
    const int ly = curve_high ? L.plot_y + L.plot_height - 10 : L.plot_y + 8 + tick_h;
    const int lx = x + 8 + w < L.plot_x + L.plot_width ? x + 8 : x - 8 - w;
    cv::rectangle(canvas, {lx - 3, ly - tick_h - 4, w + 6, tick_h + 8}, detail::paper, cv::FILLED);
    detail::draw_text(canvas, s, {lx, ly}, tick_font, mark);
  }

  detail::write_png(path, canvas);
  return L;
}

} // namespace wavestack::render
