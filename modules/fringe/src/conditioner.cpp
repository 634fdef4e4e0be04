#include "wavestack/fringe/conditioner.hpp"

#include "wavestack/core/error.hpp"

#include <algorithm>
#include <cmath>
#include <string>

namespace wavestack::fringe {
namespace {

std::string size_text(std::size_t h, std::size_t w) {
  return std::to_string(h) + "x" + std::to_string(w);
}

/// Half-sample symmetric reflection of index i into [0, n), period 2n
/// (scipy.ndimage mode "reflect").
std::uint32_t reflect(long i, long n) {
  const long p = 2 * n;
  long m = i % p;
  if (m < 0) m += p;
  return static_cast<std::uint32_t>(m < n ? m : p - 1 - m);
}

void reflection_tables(std::size_t n, int k, std::vector<std::uint32_t>& add,
                       std::vector<std::uint32_t>& sub, std::vector<std::uint32_t>& first) {
  const long r = k / 2;
  const long nn = static_cast<long>(n);
  first.resize(static_cast<std::size_t>(k));
  for (long j = -r; j <= r; ++j) first[static_cast<std::size_t>(j + r)] = reflect(j, nn);
  add.resize(n);
  sub.resize(n);
  for (long i = 0; i < nn; ++i) {
    add[static_cast<std::size_t>(i)] = reflect(i + r + 1, nn);
    sub[static_cast<std::size_t>(i)] = reflect(i - r, nn);
  }
}

int odd_at_least(double v) {
  int k = static_cast<int>(std::ceil(v));
  if (k < 1) k = 1;
  if (k % 2 == 0) ++k;
  return k;
}

int automatic_window(std::size_t h, std::size_t w, double fringe_period) {
  const int side = static_cast<int>(std::min(h, w));
  int k;
  if (fringe_period > 0) {
    k = odd_at_least(4.0 * fringe_period);
  } else {
    // nearest odd number to side/32, at least 3
    const double target = side / 32.0;
    k = 2 * static_cast<int>(std::floor((target - 1.0) / 2.0 + 0.5)) + 1;
    k = std::max(k, 3);
  }
  if (k > side) k = (side % 2 == 1) ? side : side - 1;
  return std::max(k, 1);
}

} // namespace

std::vector<double> tukey_window(std::size_t n, double alpha) {
  std::vector<double> win(n, 1.0);
  if (n <= 1 || alpha <= 0.0) return win;
  const double a = std::min(alpha, 1.0);
  for (std::size_t i = 0; i < n; ++i) {
    const double u = static_cast<double>(i) / static_cast<double>(n - 1);
    if (u < a / 2.0)
      win[i] = 0.5 * (1.0 + std::cos(M_PI * (2.0 * u / a - 1.0)));
    else if (u > 1.0 - a / 2.0)
      win[i] = 0.5 * (1.0 + std::cos(M_PI * (2.0 * u / a - 2.0 / a + 1.0)));
  }
  return win;
}

Conditioner::Conditioner(std::size_t h, std::size_t w, ConditionerOptions options,
                         const Image<float>* background)
    : h_(h), w_(w), opt_(options) {
  if (h == 0 || w == 0)
    fail_config("fringe conditioning needs a non-empty frame size, got " + size_text(h, w));
  if (!(opt_.tukey_alpha >= 0.0 && opt_.tukey_alpha <= 1.0))
    fail_config("Tukey alpha must lie in [0, 1] (fraction of each axis that is tapered), got " +
                std::to_string(opt_.tukey_alpha));
  if (opt_.local_window < 0 || (opt_.local_window > 0 && opt_.local_window % 2 == 0))
    fail_config("local DC window must be an odd number of pixels (or 0 for automatic), got " +
                std::to_string(opt_.local_window));
  if (!(opt_.fringe_period >= 0.0))
    fail_config("fringe period must be >= 0 pixels, got " + std::to_string(opt_.fringe_period));

  if (background) {
    if (background->height() != h || background->width() != w)
      fail_input("background hologram is " + size_text(background->height(), background->width()) +
                 " pixels but the holograms are " + size_text(h, w) +
                 "; the background must have the same size");
    double sum = 0;
    std::size_t n = 0;
    for (float v : *background)
      if (std::isfinite(v)) {
        sum += v;
        ++n;
      }
    const double mean = n ? sum / static_cast<double>(n) : 0.0;
    if (!(mean > 0.0) || !std::isfinite(mean))
      fail_input("background hologram has no positive mean intensity (mean of finite pixels = " +
                 std::to_string(mean) + "), so holograms cannot be divided by it");
    const float floor = static_cast<float>(background_epsilon * mean);
    inv_background_.resize(h, w);
    const float* b = background->data();
    float* ib = inv_background_.data();
    for (std::size_t i = 0; i < h * w; ++i) {
      const float v = (b[i] >= floor) ? b[i] : floor; // NaN and dark pixels -> floor
      ib[i] = 1.0f / v;
    }
  }

  if (opt_.dc == DcMode::local) {
    k_ = opt_.local_window > 0 ? opt_.local_window : automatic_window(h, w, opt_.fringe_period);
    reflection_tables(w, k_, add_x_, sub_x_, first_x_);
    reflection_tables(h, k_, add_y_, sub_y_, first_y_);
  }

  if (opt_.tukey) {
    const auto wy = tukey_window(h, opt_.tukey_alpha);
    const auto wx = tukey_window(w, opt_.tukey_alpha);
    win_y_.assign(wy.begin(), wy.end());
    win_x_.assign(wx.begin(), wx.end());
  }
}

Conditioner::Workspace Conditioner::make_workspace() const {
  Workspace ws;
  if (opt_.dc == DcMode::local) {
    ws.row_mean.resize(h_, w_);
    ws.column.assign(w_, 0.0);
  }
  return ws;
}

void Conditioner::subtract_local_mean(ImageView<float> img, Workspace& ws) const {
  const double inv_k = 1.0 / k_;
  // Horizontal box means into ws.row_mean.
  for (std::size_t y = 0; y < h_; ++y) {
    const float* src = img.row(y);
    float* dst = ws.row_mean.row(y);
    double s = 0;
    for (std::uint32_t j : first_x_) s += src[j];
    dst[0] = static_cast<float>(s * inv_k);
    for (std::size_t x = 0; x + 1 < w_; ++x) {
      s += static_cast<double>(src[add_x_[x]]) - static_cast<double>(src[sub_x_[x]]);
      dst[x + 1] = static_cast<float>(s * inv_k);
    }
  }
  // Vertical box of the horizontal means, one running sum per column.
  double* col = ws.column.data();
  std::fill(col, col + w_, 0.0);
  for (std::uint32_t j : first_y_) {
    const float* r = ws.row_mean.row(j);
    for (std::size_t x = 0; x < w_; ++x) col[x] += r[x];
  }
  for (std::size_t y = 0; y < h_; ++y) {
    float* out = img.row(y);
    for (std::size_t x = 0; x < w_; ++x) out[x] -= static_cast<float>(col[x] * inv_k);
    if (y + 1 < h_) {
      const float* ra = ws.row_mean.row(add_y_[y]);
      const float* rs = ws.row_mean.row(sub_y_[y]);
      for (std::size_t x = 0; x < w_; ++x)
        col[x] += static_cast<double>(ra[x]) - static_cast<double>(rs[x]);
    }
  }
}

void Conditioner::apply(ImageView<float> img, Workspace& ws) const {
  if (img.height() != h_ || img.width() != w_)
    fail_input("frame is " + size_text(img.height(), img.width()) +
               " pixels but fringe conditioning was planned for " + size_text(h_, w_));

  if (!inv_background_.empty()) {
    for (std::size_t y = 0; y < h_; ++y) {
      float* p = img.row(y);
      const float* ib = inv_background_.row(y);
      for (std::size_t x = 0; x < w_; ++x) p[x] *= ib[x];
    }
  }

  switch (opt_.dc) {
  case DcMode::none:
    break;
  case DcMode::mean: {
    // Eight independent double accumulators: one chain of dependent adds
    // would be latency-bound (about 4 cycles per pixel); eight lanes let the
    // compiler vectorise while the sum stays in double and deterministic.
    double s = 0;
    for (std::size_t y = 0; y < h_; ++y) {
      const float* p = img.row(y);
      double lane[8] = {0, 0, 0, 0, 0, 0, 0, 0};
      std::size_t x = 0;
      for (; x + 8 <= w_; x += 8)
        for (int k = 0; k < 8; ++k) lane[k] += p[x + static_cast<std::size_t>(k)];
      double rs = 0;
      for (; x < w_; ++x) rs += p[x];
      for (int k = 0; k < 8; ++k) rs += lane[k];
      s += rs;
    }
    const float mean = static_cast<float>(s / static_cast<double>(h_ * w_));
    for (std::size_t y = 0; y < h_; ++y) {
      float* p = img.row(y);
      for (std::size_t x = 0; x < w_; ++x) p[x] -= mean;
    }
    break;
  }
  case DcMode::local:
    if (ws.row_mean.height() != h_ || ws.row_mean.width() != w_ || ws.column.size() != w_)
      fail_internal("fringe workspace was not made by this conditioner (call make_workspace())");
    subtract_local_mean(img, ws);
    break;
  }

  if (!win_y_.empty()) {
    for (std::size_t y = 0; y < h_; ++y) {
      float* p = img.row(y);
      const float wy = win_y_[y];
      for (std::size_t x = 0; x < w_; ++x) p[x] *= wy * win_x_[x];
    }
  }
}

FrameStats frame_stats(ImageView<const float> frame, float saturation_level) {
  FrameStats st;
  st.count = frame.height() * frame.width();
  float mn = 0, mx = 0;
  bool any = false;
  double sum = 0;
  std::size_t finite = 0, saturated = 0;
  for (std::size_t y = 0; y < frame.height(); ++y) {
    const float* p = frame.row(y);
    for (std::size_t x = 0; x < frame.width(); ++x) {
      const float v = p[x];
      if (!std::isfinite(v)) {
        ++st.nonfinite;
        if (saturation_level > 0 && v > 0) ++saturated; // +Inf is above any level
        continue;
      }
      if (!any) {
        mn = mx = v;
        any = true;
      } else {
        mn = std::min(mn, v);
        mx = std::max(mx, v);
      }
      sum += v;
      ++finite;
      if (saturation_level > 0 && v >= saturation_level) ++saturated;
    }
  }
  st.min = mn;
  st.max = mx;
  st.mean = finite ? sum / static_cast<double>(finite) : 0.0;
  st.saturated_fraction = st.count ? static_cast<double>(saturated) / static_cast<double>(st.count) : 0.0;
  return st;
}

} // namespace wavestack::fringe
