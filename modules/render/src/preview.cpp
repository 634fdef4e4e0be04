#include "wavestack/render/preview.hpp"

#include "draw.hpp"
#include "wavestack/core/error.hpp"

#include <opencv2/imgproc.hpp>

#include <algorithm>
#include <array>
#include <cmath>
#include <cstdio>
#include <limits>
#include <mutex>

namespace wavestack::render {

using detail::Font;

bool is_cyclic(Colormap map) noexcept { return map == Colormap::twilight || map == Colormap::twilight_shifted; }

std::string_view colormap_name(Colormap map) noexcept {
  switch (map) {
  case Colormap::viridis: return "viridis";
  case Colormap::cividis: return "cividis";
  case Colormap::twilight: return "twilight";
  case Colormap::twilight_shifted: return "twilight_shifted";
  case Colormap::gray: return "gray";
  }
  return "unknown";
}

namespace {

using Lut = std::array<cv::Vec3b, 256>; // BGR

const Lut& lut(Colormap map) {
  static std::once_flag once;
  static std::array<Lut, 5> luts;
  std::call_once(once, [] {
    cv::Mat ramp(256, 1, CV_8UC1);
    for (int i = 0; i < 256; ++i) ramp.at<std::uint8_t>(i) = static_cast<std::uint8_t>(i);
    const std::pair<Colormap, int> maps[] = {{Colormap::viridis, cv::COLORMAP_VIRIDIS},
                                             {Colormap::cividis, cv::COLORMAP_CIVIDIS},
                                             {Colormap::twilight, cv::COLORMAP_TWILIGHT},
                                             {Colormap::twilight_shifted, cv::COLORMAP_TWILIGHT_SHIFTED}};
    for (const auto& [m, cv_map] : maps) {
      cv::Mat out;
      cv::applyColorMap(ramp, out, cv_map);
      for (int i = 0; i < 256; ++i) luts[static_cast<int>(m)][i] = out.at<cv::Vec3b>(i);
    }
    for (int i = 0; i < 256; ++i) {
      const auto v = static_cast<std::uint8_t>(i);
      luts[static_cast<int>(Colormap::gray)][i] = cv::Vec3b(v, v, v);
    }
  });
  return luts[static_cast<int>(map)];
}

// The no-data hatch: two greys no colormap above contains as a pair.
const cv::Vec3b nodata_light(150, 150, 150), nodata_dark(110, 110, 110);

int lut_index(double t) {
  t = std::clamp(t, 0.0, 1.0);
  return static_cast<int>(std::lround(t * 255.0));
}

} // namespace

Rgb colormap_color(Colormap map, double t) {
  if (std::isnan(t)) return nodata_color();
  const cv::Vec3b c = lut(map)[static_cast<std::size_t>(lut_index(t))];
  return {c[2], c[1], c[0]};
}

Rgb nodata_color() noexcept { return {nodata_light[2], nodata_light[1], nodata_light[0]}; }

// --- numbers -----------------------------------------------------------------

std::pair<double, double> robust_range(ImageView<const float> data, double low_pct, double high_pct) {
  const std::size_t total = data.height() * data.width();
  constexpr std::size_t max_samples = std::size_t{1} << 20;
  std::size_t step = 1;
  while (total / (step * step) > max_samples) ++step;
  std::vector<float> v;
  v.reserve(std::min(total, max_samples * 2));
  for (std::size_t y = 0; y < data.height(); y += step) {
    const float* row = data.row(y);
    for (std::size_t x = 0; x < data.width(); x += step)
      if (std::isfinite(row[x])) v.push_back(row[x]);
  }
  if (v.empty()) return {0.0, 1.0};
  // numpy.percentile, method "linear": position p/100 * (n - 1) between order statistics
  auto percentile = [&](double p) {
    const double pos = std::clamp(p, 0.0, 100.0) / 100.0 * static_cast<double>(v.size() - 1);
    const auto i = static_cast<std::size_t>(std::floor(pos));
    std::nth_element(v.begin(), v.begin() + static_cast<std::ptrdiff_t>(i), v.end());
    const double a = v[i];
    if (i + 1 >= v.size()) return a;
    const double b = *std::min_element(v.begin() + static_cast<std::ptrdiff_t>(i) + 1, v.end());
    return a + (pos - static_cast<double>(i)) * (b - a);
  };
  double lo = percentile(low_pct), hi = percentile(high_pct);
  if (lo > hi) std::swap(lo, hi);
  if (hi - lo <= 1e-12 * std::max(1.0, std::abs(lo))) {
    const double d = lo == 0.0 ? 1.0 : 0.05 * std::abs(lo);
    lo -= d;
    hi += d;
  }
  return {lo, hi};
}

ScaleBar choose_scale_bar(double field_width_m) {
  ScaleBar bar;
  if (!(field_width_m > 0) || !std::isfinite(field_width_m)) return bar;
  const double target_um = field_width_m / 5.0 * 1e6;
  const double k = std::floor(std::log10(target_um));
  double best = 0, best_err = 1e300;
  for (double e = k - 1; e <= k + 1; ++e)
    for (double m : {1.0, 2.0, 5.0}) {
      const double c = m * std::pow(10.0, e);
      const double err = std::abs(std::log(c / target_um));
      if (err < best_err) {
        best_err = err;
        best = c;
      }
    }
  // snap away floating-point noise (e.g. 0.20000000000000001)
  const double mag = std::pow(10.0, std::floor(std::log10(best)));
  best = std::round(best / mag) * mag;
  bar.length_m = best * 1e-6;
  char buf[32];
  if (best >= 1000) std::snprintf(buf, sizeof buf, "%g mm", best / 1000);
  else std::snprintf(buf, sizeof buf, "%g \xC2\xB5m", best);
  bar.label = buf;
  return bar;
}

std::vector<double> nice_ticks(double lo, double hi, int target) {
  std::vector<double> ticks;
  if (!std::isfinite(lo) || !std::isfinite(hi) || hi <= lo || target < 1) return ticks;
  const double rough = (hi - lo) / target;
  const double mag = std::pow(10.0, std::floor(std::log10(rough)));
  const double norm = rough / mag;
  const double step = (norm < 1.5 ? 1 : norm < 3 ? 2 : norm < 7 ? 5 : 10) * mag;
  const double eps = step * 1e-9;
  for (double t = std::ceil((lo - eps) / step) * step; t <= hi + eps; t += step)
    ticks.push_back(std::abs(t) < eps ? 0.0 : t);
  return ticks;
}

std::string format_tick(double value, double step) {
  char buf[48];
  const double a = std::abs(value);
  if (value == 0.0) return "0";
  if (step > 0 && (a >= 1e5 || step < 1e-4)) {
    // scientific with as many mantissa digits as the step needs
    const int e = static_cast<int>(std::floor(std::log10(a)));
    const int digits = std::clamp(e - static_cast<int>(std::floor(std::log10(step))), 0, 6);
    std::snprintf(buf, sizeof buf, "%.*e", digits, value);
    // "2e-08" -> "2e-8", "1.5e+05" -> "1.5e5"
    std::string s = buf;
    const std::size_t epos = s.find('e');
    std::string mant = s.substr(0, epos), exp = s.substr(epos + 1);
    const bool neg = exp[0] == '-';
    exp = exp.substr(1);
    while (exp.size() > 1 && exp[0] == '0') exp.erase(0, 1);
    return mant + "e" + (neg ? "-" : "") + exp;
  }
  // fewest decimals that show the step exactly (2.5 needs one, 0.2 one, 50 none)
  int decimals = 3;
  if (step > 0) {
    decimals = std::clamp(-static_cast<int>(std::floor(std::log10(step) + 1e-9)), 0, 6);
    while (decimals < 6) {
      const double scaled = step * std::pow(10.0, decimals);
      if (std::abs(scaled - std::round(scaled)) <= 1e-6 * scaled) break;
      ++decimals;
    }
  }
  std::snprintf(buf, sizeof buf, "%.*f", decimals, value);
  return buf;
}

// --- the preview ---------------------------------------------------------------

namespace {

/// Ticks of the colour bar: multiples of π/2 labelled with π for radian
/// ranges that are themselves multiples of π/2, round numbers otherwise.
std::vector<std::pair<double, std::string>> bar_ticks(double lo, double hi, const std::string& units) {
  std::vector<std::pair<double, std::string>> out;
  const double half_pi = M_PI / 2;
  const bool radians = units == "rad";
  const double ql = lo / half_pi, qh = hi / half_pi;
  if (radians && std::abs(ql - std::round(ql)) < 1e-4 && std::abs(qh - std::round(qh)) < 1e-4 && qh - ql >= 1.5) {
    const long a = std::lround(ql), b = std::lround(qh);
    const long stride = (b - a) > 8 ? 2 : 1; // π steps when the range is wide
    for (long q = a; q <= b; ++q) {
      if (q % stride) continue;
      std::string s;
      if (q == 0) s = "0";
      else {
        const long num = q % 2 == 0 ? q / 2 : q; // in units of π (even) or π/2 (odd)
        const bool half = q % 2 != 0;
        if (num == 1) s = "\xCF\x80";
        else if (num == -1) s = "-\xCF\x80";
        else s = std::to_string(num) + "\xCF\x80";
        if (half) s += "/2";
      }
      out.emplace_back(static_cast<double>(q) * half_pi, s);
    }
    return out;
  }
  const auto ticks = nice_ticks(lo, hi, 5);
  const double step = ticks.size() > 1 ? ticks[1] - ticks[0] : (hi - lo);
  for (double t : ticks) out.emplace_back(t, format_tick(t, step));
  return out;
}

/// Clamp to [lo, hi] (keeping NaN) and resample to the display size.
cv::Mat display_values(ImageView<const float> data, double lo, double hi, double zoom, bool cyclic,
                       bool& has_nan) {
  const int h = static_cast<int>(data.height()), w = static_cast<int>(data.width());
  cv::Mat v(h, w, CV_32F);
  has_nan = false;
  for (int y = 0; y < h; ++y) {
    const float* src = data.row(static_cast<std::size_t>(y));
    float* dst = v.ptr<float>(y);
    for (int x = 0; x < w; ++x) {
      const float s = src[x];
      if (std::isnan(s)) {
        has_nan = true;
        dst[x] = s;
      } else {
        dst[x] = static_cast<float>(std::clamp(static_cast<double>(s), lo, hi));
      }
    }
  }
  if (zoom == 1.0) return v;
  const int dw = std::max(1, static_cast<int>(std::lround(w * zoom)));
  const int dh = std::max(1, static_cast<int>(std::lround(h * zoom)));
  cv::Mat out;
  if (zoom > 1.0 || cyclic || !has_nan) {
    cv::resize(v, out, {dw, dh}, 0, 0, zoom > 1.0 || cyclic ? cv::INTER_NEAREST : cv::INTER_AREA);
    return out;
  }
  // NaN-aware area averaging: average the valid values, NaN where less than
  // half of the area had data.
  cv::Mat valid(h, w, CV_32F), filled = v.clone();
  for (int y = 0; y < h; ++y)
    for (int x = 0; x < w; ++x) {
      const bool ok = !std::isnan(v.at<float>(y, x));
      valid.at<float>(y, x) = ok ? 1.0f : 0.0f;
      if (!ok) filled.at<float>(y, x) = 0.0f;
    }
  cv::Mat sum, weight;
  cv::resize(filled, sum, {dw, dh}, 0, 0, cv::INTER_AREA);
  cv::resize(valid, weight, {dw, dh}, 0, 0, cv::INTER_AREA);
  out.create(dh, dw, CV_32F);
  for (int y = 0; y < dh; ++y)
    for (int x = 0; x < dw; ++x) {
      const float wgt = weight.at<float>(y, x);
      out.at<float>(y, x) = wgt >= 0.5f ? sum.at<float>(y, x) / wgt : std::numeric_limits<float>::quiet_NaN();
    }
  return out;
}

void hatch(cv::Mat& canvas, cv::Rect r) {
  for (int y = r.y; y < r.y + r.height; ++y)
    for (int x = r.x; x < r.x + r.width; ++x)
      canvas.at<cv::Vec3b>(y, x) = ((x + y) % 6 < 2) ? nodata_dark : nodata_light;
}

} // namespace

PreviewLayout write_preview(const std::string& path, ImageView<const float> data, const PreviewOptions& opt) {
  if (data.empty()) {
    ErrorContext ctx;
    ctx.file = path;
    fail_internal("write_preview: empty image", ctx);
  }
  PreviewLayout L;
  if (opt.range) {
    L.low = opt.range->first;
    L.high = opt.range->second;
    if (!(L.high > L.low)) std::tie(L.low, L.high) = robust_range(data, 0, 100);
  } else {
    std::tie(L.low, L.high) = robust_range(data, opt.low_percentile, opt.high_percentile);
  }

  // display size
  const double longest = static_cast<double>(std::max(data.height(), data.width()));
  if (longest > opt.max_side) L.zoom = opt.max_side / longest;
  else if (longest < opt.min_side) L.zoom = std::floor(opt.min_side / longest);
  const bool cyclic = is_cyclic(opt.colormap);
  bool has_nan = false;
  const cv::Mat values = display_values(data, L.low, L.high, L.zoom, cyclic, has_nan);
  L.has_nodata = has_nan;
  L.image_width = values.cols;
  L.image_height = values.rows;

  // layout
  const int margin = 16;
  Font title_font{0.6, 1}, label_font{0.45, 1}, units_font{0.5, 1};
  const int label_h = detail::text_size("0", label_font).height;
  const auto ticks = bar_ticks(L.low, L.high, opt.units);
  int label_w = 0;
  for (const auto& t : ticks) label_w = std::max(label_w, detail::text_size(t.second, label_font).width);
  const int units_w = opt.units.empty() ? 0 : detail::text_size(opt.units, units_font).width;
  const int units_h = detail::text_size("0", units_font).height;
  L.bar_width = 18;
  const int tick_len = 5;
  const int bar_block = L.bar_width + tick_len + 4 + std::max(label_w, has_nan ? detail::text_size("no data", label_font).width : 0);
  const int right_block = std::max(bar_block, units_w);

  const int content_w = L.image_width + 20 + right_block;
  const int title_band = opt.title.empty() ? margin : detail::text_size("H", title_font).height + 2 * margin;
  L.image_x = margin;
  L.image_y = title_band;
  L.canvas_width = std::max(content_w + 2 * margin, 240);
  // tall enough for the bar's labels even when the image is very flat
  const int bar_top_offset = opt.units.empty() ? label_h / 2 + 2 : units_h + 16;
  const int swatch = has_nan ? label_h + 12 : 0;
  const int bar_bottom_offset = label_h / 2 + 2 + swatch;
  const int min_bar = static_cast<int>(std::max<std::size_t>(ticks.size(), 3)) * (label_h + 10);
  const int body_h = std::max(L.image_height, bar_top_offset + min_bar + bar_bottom_offset);
  L.canvas_height = title_band + body_h + margin;
  cv::Mat canvas(L.canvas_height, L.canvas_width, CV_8UC3, detail::paper);

  // image
  const Lut& map = lut(opt.colormap);
  const double span = L.high - L.low;
  for (int y = 0; y < L.image_height; ++y) {
    const float* v = values.ptr<float>(y);
    cv::Vec3b* dst = canvas.ptr<cv::Vec3b>(L.image_y + y) + L.image_x;
    for (int x = 0; x < L.image_width; ++x) {
      if (std::isnan(v[x])) {
        const int cx = L.image_x + x, cy = L.image_y + y;
        dst[x] = ((cx + cy) % 6 < 2) ? nodata_dark : nodata_light;
      } else {
        dst[x] = map[static_cast<std::size_t>(lut_index((v[x] - L.low) / span))];
      }
    }
  }

  // title
  if (!opt.title.empty()) {
    Font f = title_font;
    const std::string t = detail::fit_text(opt.title, L.canvas_width - 2 * margin, f, 0.4);
    detail::draw_text(canvas, t, {margin, margin + detail::text_size("H", title_font).height}, f, detail::ink);
  }

  // colour bar: units above it, no-data swatch below it
  L.bar_x = L.image_x + L.image_width + 20;
  const int bar_top = L.image_y + bar_top_offset;
  const int bar_bottom = L.image_y + body_h - bar_bottom_offset;
  L.bar_y = bar_top;
  L.bar_height = std::max(10, bar_bottom - bar_top);
  if (!opt.units.empty()) detail::draw_text(canvas, opt.units, {L.bar_x, L.image_y + units_h}, units_font, detail::ink);
  for (int y = 0; y < L.bar_height; ++y) {
    const double t = L.bar_height > 1 ? 1.0 - static_cast<double>(y) / (L.bar_height - 1) : 0.5;
    const cv::Vec3b c = map[static_cast<std::size_t>(lut_index(t))];
    for (int x = 0; x < L.bar_width; ++x) canvas.at<cv::Vec3b>(L.bar_y + y, L.bar_x + x) = c;
  }
  cv::rectangle(canvas, {L.bar_x - 1, L.bar_y - 1, L.bar_width + 2, L.bar_height + 2}, detail::ink, 1);
  int last_label_y = std::numeric_limits<int>::max();
  for (const auto& [value, text] : ticks) {
    const double t = (value - L.low) / span;
    if (t < -1e-9 || t > 1 + 1e-9) continue;
    const int y = L.bar_y + static_cast<int>(std::lround((1.0 - t) * (L.bar_height - 1)));
    if (last_label_y - y < label_h + 4) continue; // would overlap the label below
    last_label_y = y;
    cv::line(canvas, {L.bar_x + L.bar_width, y}, {L.bar_x + L.bar_width + tick_len, y}, detail::ink, 1);
    detail::draw_text(canvas, text, {L.bar_x + L.bar_width + tick_len + 4, y + label_h / 2}, label_font, detail::ink);
  }
  if (has_nan) {
    const cv::Rect r(L.bar_x, L.bar_y + L.bar_height + 10, L.bar_width, label_h + 2);
    hatch(canvas, r);
    cv::rectangle(canvas, {r.x - 1, r.y - 1, r.width + 2, r.height + 2}, detail::ink, 1);
    detail::draw_text(canvas, "no data", {L.bar_x + L.bar_width + tick_len + 4, r.y + r.height - 1}, label_font,
                      detail::ink);
  }

  // scale bar: bottom left on the image, light with a dark outline
  if (opt.pixel_pitch_m > 0) {
    const double field_m = static_cast<double>(data.width()) * opt.pixel_pitch_m;
    const ScaleBar bar = choose_scale_bar(field_m);
    const int px = static_cast<int>(std::lround(bar.length_m / opt.pixel_pitch_m * L.zoom));
    const int inset = 12, thick = 6;
    Font f{0.5, 1};
    if (detail::text_size(bar.label, f).width + 2 * inset > L.image_width) f.scale = 0.4;
    const cv::Size ts = detail::text_size(bar.label, f);
    if (px >= 8 && std::max(px, ts.width) + 2 * inset <= L.image_width &&
        ts.height + thick + 3 * inset <= L.image_height) {
      const int x0 = L.image_x + inset;
      const int y1 = L.image_y + L.image_height - inset;
      cv::rectangle(canvas, cv::Rect(x0 - 1, y1 - thick - 1, px + 2, thick + 2), cv::Scalar(0, 0, 0), cv::FILLED);
      cv::rectangle(canvas, cv::Rect(x0, y1 - thick, px, thick), cv::Scalar(255, 255, 255), cv::FILLED);
      const int tx = x0 + std::max(0, (px - ts.width) / 2);
      detail::draw_outlined_text(canvas, bar.label, {tx, y1 - thick - 6}, f);
      L.has_scale_bar = true;
      L.scale_bar_m = bar.length_m;
      L.scale_bar_px = px;
    }
  }

  detail::write_png(path, canvas);
  return L;
}

} // namespace wavestack::render
