#include "wavestack/quantify/objects.hpp"

#include "wavestack/core/error.hpp"

#include <algorithm>
#include <cmath>
#include <limits>
#include <string>

namespace wavestack::quantify {
namespace {

constexpr std::size_t max_samples = 65536;
constexpr double clip_sigmas = 3.0;
constexpr int clip_passes = 5;

std::int32_t find(std::vector<std::int32_t>& parent, std::int32_t x) {
  std::int32_t r = x;
  while (parent[static_cast<std::size_t>(r)] != r) r = parent[static_cast<std::size_t>(r)];
  while (parent[static_cast<std::size_t>(x)] != r) { // path compression
    const std::int32_t next = parent[static_cast<std::size_t>(x)];
    parent[static_cast<std::size_t>(x)] = r;
    x = next;
  }
  return r;
}

void unite(std::vector<std::int32_t>& parent, std::int32_t a, std::int32_t b) {
  a = find(parent, a);
  b = find(parent, b);
  if (a == b) return;
  if (a < b) parent[static_cast<std::size_t>(b)] = a;
  else parent[static_cast<std::size_t>(a)] = b;
}

/// Median and 1.4826·MAD of v (reordered).
void robust_stats(std::vector<float>& v, double& median, double& sigma) {
  const std::size_t mid = v.size() / 2;
  std::nth_element(v.begin(), v.begin() + static_cast<long>(mid), v.end());
  median = v[mid];
  for (float& x : v) x = static_cast<float>(std::abs(static_cast<double>(x) - median));
  std::nth_element(v.begin(), v.begin() + static_cast<long>(mid), v.end());
  sigma = 1.4826 * v[mid];
}

/// Median and robust σ of `v` after iterative clipping at clip_sigmas·σ
/// around the median (`passes` passes; stops early when nothing changes).
/// `v` is filtered in place, `scratch` is reused.
void clipped_stats(std::vector<float>& v, std::vector<float>& scratch, double clip_sigmas, int passes,
                   double& median, double& sigma) {
  for (int p = 0;; ++p) {
    scratch.assign(v.begin(), v.end());
    robust_stats(scratch, median, sigma);
    if (p == passes) return;
    const double lim = clip_sigmas * sigma;
    const std::size_t before = v.size();
    std::size_t k = 0;
    for (float x : v)
      if (std::abs(static_cast<double>(x) - median) <= lim) v[k++] = x;
    if (k == before || k < 16) return; // converged, or too few left to clip further
    v.resize(k);
  }
}

/// Square dilation of a 0/1 image by d pixels (through tmp).
void dilate(const Image<std::uint8_t>& in, Image<std::uint8_t>& tmp, Image<std::uint8_t>& out, int d,
            std::vector<int>& counts) {
  const long D = d, W = static_cast<long>(in.width()), H = static_cast<long>(in.height());
  if (d == 0) {
    out = in;
    return;
  }
  for (long y = 0; y < H; ++y) {
    const std::uint8_t* s = in.row(static_cast<std::size_t>(y));
    std::uint8_t* t = tmp.row(static_cast<std::size_t>(y));
    int count = 0;
    for (long x = 0; x <= std::min(D, W - 1); ++x) count += s[x];
    for (long x = 0; x < W; ++x) {
      t[x] = count > 0;
      if (x + D + 1 < W) count += s[x + D + 1];
      if (x - D >= 0) count -= s[x - D];
    }
  }
  counts.assign(static_cast<std::size_t>(W), 0);
  for (long y = 0; y <= std::min(D, H - 1); ++y) {
    const std::uint8_t* t = tmp.row(static_cast<std::size_t>(y));
    for (long x = 0; x < W; ++x) counts[static_cast<std::size_t>(x)] += t[x];
  }
  for (long y = 0; y < H; ++y) {
    std::uint8_t* o = out.row(static_cast<std::size_t>(y));
    for (long x = 0; x < W; ++x) o[x] = counts[static_cast<std::size_t>(x)] > 0;
    if (y + D + 1 < H) {
      const std::uint8_t* t = tmp.row(static_cast<std::size_t>(y + D + 1));
      for (long x = 0; x < W; ++x) counts[static_cast<std::size_t>(x)] += t[x];
    }
    if (y - D >= 0) {
      const std::uint8_t* t = tmp.row(static_cast<std::size_t>(y - D));
      for (long x = 0; x < W; ++x) counts[static_cast<std::size_t>(x)] -= t[x];
    }
  }
}

/// Set to 1 the 0-pixels of `mask` that the border cannot reach through
/// 0-pixels (connectivity `bg_conn`). Uses tmp as the "reached" image.
void fill_holes(Image<std::uint8_t>& mask, Image<std::uint8_t>& reached, std::vector<std::uint32_t>& stack,
                int bg_conn) {
  const std::size_t h = mask.height(), w = mask.width();
  reached.fill(0);
  stack.clear();
  auto push = [&](std::size_t y, std::size_t x) {
    if (mask(y, x) == 0 && reached(y, x) == 0) {
      reached(y, x) = 1;
      stack.push_back(static_cast<std::uint32_t>(y * w + x));
    }
  };
  for (std::size_t x = 0; x < w; ++x) {
    push(0, x);
    push(h - 1, x);
  }
  for (std::size_t y = 0; y < h; ++y) {
    push(y, 0);
    push(y, w - 1);
  }
  while (!stack.empty()) {
    const std::uint32_t p = stack.back();
    stack.pop_back();
    const long y = static_cast<long>(p / w), x = static_cast<long>(p % w);
    for (long dy = -1; dy <= 1; ++dy)
      for (long dx = -1; dx <= 1; ++dx) {
        if (dy == 0 && dx == 0) continue;
        if (bg_conn == 4 && dy != 0 && dx != 0) continue;
        const long yy = y + dy, xx = x + dx;
        if (yy < 0 || xx < 0 || yy >= static_cast<long>(h) || xx >= static_cast<long>(w)) continue;
        push(static_cast<std::size_t>(yy), static_cast<std::size_t>(xx));
      }
  }
  for (std::size_t p = 0; p < h * w; ++p)
    if (mask.data()[p] == 0 && reached.data()[p] == 0) mask.data()[p] = 1;
}

} // namespace

double otsu_threshold(ImageView<const float> img, std::vector<std::uint64_t>& hist, int bins) {
  if (bins < 2) fail_config("Otsu's method needs at least 2 histogram bins");
  double lo = std::numeric_limits<double>::infinity(), hi = -lo;
  for (std::size_t y = 0; y < img.height(); ++y)
    for (std::size_t x = 0; x < img.width(); ++x) {
      const float v = img(y, x);
      if (std::isfinite(v)) {
        lo = std::min(lo, static_cast<double>(v));
        hi = std::max(hi, static_cast<double>(v));
      }
    }
  if (!(lo <= hi)) fail_input("Otsu threshold of a map without finite values");
  if (lo == hi) return lo;
  const std::size_t nb = static_cast<std::size_t>(bins);
  hist.assign(nb, 0);
  const double width = (hi - lo) / static_cast<double>(bins);
  for (std::size_t y = 0; y < img.height(); ++y)
    for (std::size_t x = 0; x < img.width(); ++x) {
      const float v = img(y, x);
      if (!std::isfinite(v)) continue;
      // numpy.histogram: equal bins on [lo, hi], the last one closed.
      std::size_t b = static_cast<std::size_t>((static_cast<double>(v) - lo) / width);
      if (b >= nb) b = nb - 1;
      ++hist[b];
    }
  // Between-class variance w1(k)·w2(k+1)·(μ1(k) − μ2(k+1))², maximised
  // over the split after bin k (skimage's formulation; the first maximum).
  auto centre = [&](std::size_t k) { return lo + (static_cast<double>(k) + 0.5) * width; };
  double total_w = 0, total_m = 0;
  for (std::size_t k = 0; k < nb; ++k) {
    total_w += static_cast<double>(hist[k]);
    total_m += static_cast<double>(hist[k]) * centre(k);
  }
  double w1 = 0, m1 = 0, best = -1;
  std::size_t best_k = 0;
  for (std::size_t k = 0; k + 1 < nb; ++k) {
    w1 += static_cast<double>(hist[k]);
    m1 += static_cast<double>(hist[k]) * centre(k);
    const double w2 = total_w - w1;
    if (w1 <= 0 || w2 <= 0) continue;
    const double d = m1 / w1 - (total_m - m1) / w2;
    const double v = w1 * w2 * d * d;
    if (v > best) {
      best = v;
      best_k = k;
    }
  }
  return centre(best_k);
}

ObjectAnalyzer::ObjectAnalyzer(std::size_t height, std::size_t width, const Grid& grid, ObjectOptions options)
    : h_(height), w_(width), grid_(grid), opt_(options) {
  if (h_ == 0 || w_ == 0) fail_config("object analysis needs a non-empty frame");
  if (h_ * w_ > static_cast<std::size_t>(std::numeric_limits<std::int32_t>::max() / 2))
    fail_config("frame too large for object labelling");
  if (!(grid.dx > 0) || !(grid.dy > 0) || !std::isfinite(grid.dx) || !std::isfinite(grid.dy))
    fail_config("object analysis needs the pixel pitch (positive lengths)");
  if (opt_.connectivity != 4 && opt_.connectivity != 8) fail_config("connectivity must be 4 or 8");
  if (!(opt_.robust_sigmas > 0)) fail_config("robust_sigmas must be positive");
  if (!std::isfinite(opt_.threshold_nm)) fail_config("threshold_nm must be finite");
  if (!(opt_.min_area >= 0)) fail_config("min_area must be >= 0");
  if (opt_.background_margin < 0 || opt_.background_margin > 64) fail_config("background_margin must be 0..64 pixels");
  if (!(opt_.alpha > 0 && opt_.alpha < 1))
    fail_config("the specific refraction increment alpha must lie in (0, 1) um^3/pg (mL/g)");
  pixel_area_um2_ = grid.dx * grid.dy * 1e12;
}

ObjectAnalyzer::Workspace ObjectAnalyzer::make_workspace() const {
  Workspace ws;
  const std::size_t n = h_ * w_;
  ws.labels.resize(h_, w_);
  ws.mask.resize(h_, w_);
  ws.tmp.resize(h_, w_);
  ws.near.resize(h_, w_);
  // Provisional labels: a new one starts only where the left neighbour is not
  // object, so at most ceil(w/2) per row.
  const std::size_t max_labels = h_ * ((w_ + 1) / 2) + 2;
  ws.parent.reserve(max_labels);
  ws.remap.reserve(max_labels);
  ws.stack.reserve(n);
  ws.sample.reserve(max_samples + 1);
  ws.scratch.reserve(max_samples + 1);
  ws.counts.reserve(w_);
  ws.histogram.reserve(256);
  ws.acc.reserve(64);
  return ws;
}

void ObjectAnalyzer::analyze(ImageView<const float> opd, ObjectTable& t, Workspace& ws) const {
  if (opd.height() != h_ || opd.width() != w_)
    fail_config("object analysis planned for " + std::to_string(h_) + "x" + std::to_string(w_) + " maps, got " +
                std::to_string(opd.height()) + "x" + std::to_string(opd.width()));
  if (ws.labels.height() != h_ || ws.labels.width() != w_) fail_config("object workspace was made for another size");
  const std::size_t n = h_ * w_;

  // 1. Frame statistics.
  std::size_t finite = 0;
  for (std::size_t y = 0; y < h_; ++y)
    for (std::size_t x = 0; x < w_; ++x) finite += std::isfinite(opd(y, x));
  if (finite == 0) fail_input("the OPD map has no finite pixel");
  {
    ws.sample.clear();
    const std::size_t step = std::max<std::size_t>(1, finite / max_samples);
    std::size_t i = 0;
    for (std::size_t y = 0; y < h_; ++y)
      for (std::size_t x = 0; x < w_; ++x) {
        const float v = opd(y, x);
        if (!std::isfinite(v)) continue;
        if (i++ % step == 0 && ws.sample.size() < max_samples) ws.sample.push_back(v);
      }
    clipped_stats(ws.sample, ws.scratch, clip_sigmas, clip_passes, t.frame_median_nm, t.noise_sigma_nm);
  }
  const double b0 = opt_.subtract_background ? t.frame_median_nm : 0.0;

  // 2. Threshold.
  switch (opt_.threshold) {
  case ThresholdMode::robust: t.threshold_nm = b0 + opt_.robust_sigmas * t.noise_sigma_nm; break;
  case ThresholdMode::fixed: t.threshold_nm = b0 + opt_.threshold_nm; break;
  case ThresholdMode::otsu: t.threshold_nm = otsu_threshold(opd, ws.histogram); break;
  }
  for (std::size_t y = 0; y < h_; ++y) {
    std::uint8_t* m = ws.mask.row(y);
    for (std::size_t x = 0; x < w_; ++x) {
      const float v = opd(y, x);
      m[x] = std::isfinite(v) && static_cast<double>(v) > t.threshold_nm;
    }
  }

  // 3. Holes.
  if (opt_.fill_holes) fill_holes(ws.mask, ws.tmp, ws.stack, opt_.connectivity == 8 ? 4 : 8);

  // 4. Connected components (provisional labels, union–find).
  std::vector<std::int32_t>& parent = ws.parent;
  parent.clear();
  parent.push_back(0);
  const bool eight = opt_.connectivity == 8;
  for (std::size_t y = 0; y < h_; ++y) {
    const std::uint8_t* m = ws.mask.row(y);
    std::int32_t* L = ws.labels.row(y);
    const std::int32_t* U = y > 0 ? ws.labels.row(y - 1) : nullptr;
    for (std::size_t x = 0; x < w_; ++x) {
      if (!m[x]) {
        L[x] = 0;
        continue;
      }
      std::int32_t lab = 0;
      auto take = [&](std::int32_t nb) {
        if (nb == 0) return;
        if (lab == 0) lab = nb;
        else if (nb != lab) unite(parent, lab, nb);
      };
      if (x > 0) take(L[x - 1]);
      if (U) {
        take(U[x]);
        if (eight) {
          if (x > 0) take(U[x - 1]);
          if (x + 1 < w_) take(U[x + 1]);
        }
      }
      if (lab == 0) {
        lab = static_cast<std::int32_t>(parent.size());
        parent.push_back(lab);
      }
      L[x] = lab;
    }
  }
  // Final numbering by first pixel in raster order.
  std::vector<std::int32_t>& remap = ws.remap;
  remap.assign(parent.size(), 0);
  std::int32_t K = 0;
  for (std::size_t p = 0; p < n; ++p) {
    std::int32_t& l = ws.labels.data()[p];
    if (l == 0) continue;
    const std::int32_t r = find(parent, l);
    if (remap[static_cast<std::size_t>(r)] == 0) remap[static_cast<std::size_t>(r)] = ++K;
    l = remap[static_cast<std::size_t>(r)];
  }

  // Areas and border contact; drop and renumber.
  std::vector<Accum>& acc = ws.acc;
  acc.assign(static_cast<std::size_t>(K) + 1, Accum{0, 0, 0, 0, 0, 0, -std::numeric_limits<double>::infinity(),
                                                     w_, h_, 0, 0, false});
  for (std::size_t y = 0; y < h_; ++y) {
    const std::int32_t* L = ws.labels.row(y);
    for (std::size_t x = 0; x < w_; ++x) {
      if (L[x] == 0) continue;
      Accum& a = acc[static_cast<std::size_t>(L[x])];
      ++a.n;
      if (y == 0 || x == 0 || y + 1 == h_ || x + 1 == w_) a.border = true;
    }
  }
  const double min_px_area = opt_.min_area > 0 ? opt_.min_area * 1e12 / pixel_area_um2_ : 0.0;
  remap.assign(static_cast<std::size_t>(K) + 1, 0);
  std::int32_t kept = 0;
  t.rejected = 0;
  for (std::int32_t k = 1; k <= K; ++k) {
    const Accum& a = acc[static_cast<std::size_t>(k)];
    const bool drop = a.n < opt_.min_area_pixels || static_cast<double>(a.n) < min_px_area ||
                      (opt_.exclude_border && a.border);
    if (drop) ++t.rejected;
    else remap[static_cast<std::size_t>(k)] = ++kept;
  }
  for (std::size_t p = 0; p < n; ++p) {
    std::int32_t& l = ws.labels.data()[p];
    if (l) l = remap[static_cast<std::size_t>(l)];
    ws.mask.data()[p] = l != 0;
  }

  // 5. Background median away from the objects.
  t.background_nm = 0;
  t.background_pixels = 0;
  if (opt_.subtract_background) {
    dilate(ws.mask, ws.tmp, ws.near, opt_.background_margin, ws.counts);
    std::size_t nbg = 0;
    for (std::size_t y = 0; y < h_; ++y)
      for (std::size_t x = 0; x < w_; ++x) nbg += ws.near(y, x) == 0 && std::isfinite(opd(y, x));
    if (nbg == 0) fail_input("no background pixels are left around the objects for the background level");
    ws.sample.clear();
    const std::size_t step = std::max<std::size_t>(1, nbg / max_samples);
    std::size_t i = 0;
    for (std::size_t y = 0; y < h_; ++y)
      for (std::size_t x = 0; x < w_; ++x) {
        const float v = opd(y, x);
        if (ws.near(y, x) != 0 || !std::isfinite(v)) continue;
        if (i++ % step == 0 && ws.sample.size() < max_samples) ws.sample.push_back(v);
      }
    double sig = 0;
    robust_stats(ws.sample, t.background_nm, sig);
    t.background_pixels = nbg;
  }
  const double b = t.background_nm;

  // 6. Per-object sums.
  acc.assign(static_cast<std::size_t>(kept) + 1, Accum{0, 0, 0, 0, 0, 0, -std::numeric_limits<double>::infinity(),
                                                        w_, h_, 0, 0, false});
  for (std::size_t y = 0; y < h_; ++y) {
    const std::int32_t* L = ws.labels.row(y);
    for (std::size_t x = 0; x < w_; ++x) {
      if (L[x] == 0) continue;
      Accum& a = acc[static_cast<std::size_t>(L[x])];
      const double v = static_cast<double>(opd(y, x)) - b;
      const double cx = static_cast<double>(x), cy = static_cast<double>(y);
      ++a.n;
      a.sc += cx;
      a.sr += cy;
      a.so += v;
      a.soc += v * cx;
      a.sor += v * cy;
      a.omax = std::max(a.omax, v);
      a.c0 = std::min(a.c0, x);
      a.r0 = std::min(a.r0, y);
      a.c1 = std::max(a.c1, x + 1);
      a.r1 = std::max(a.r1, y + 1);
      if (y == 0 || x == 0 || y + 1 == h_ || x + 1 == w_) a.border = true;
    }
  }
  t.objects.clear();
  for (std::int32_t k = 1; k <= kept; ++k) {
    const Accum& a = acc[static_cast<std::size_t>(k)];
    ObjectRecord r;
    r.id = k;
    r.area_pixels = a.n;
    const double N = static_cast<double>(a.n);
    r.area_um2 = N * pixel_area_um2_;
    r.centroid_col = a.sc / N;
    r.centroid_row = a.sr / N;
    r.centroid_x_m = r.centroid_col * grid_.dx;
    r.centroid_y_m = r.centroid_row * grid_.dy;
    r.mass_centroid_col = a.so != 0 ? a.soc / a.so : r.centroid_col;
    r.mass_centroid_row = a.so != 0 ? a.sor / a.so : r.centroid_row;
    r.mean_opd_nm = a.so / N;
    r.peak_opd_nm = a.omax;
    r.opd_integral_um3 = a.so * 1e-3 * pixel_area_um2_;
    r.dry_mass_pg = r.opd_integral_um3 / opt_.alpha;
    r.col0 = a.c0;
    r.row0 = a.r0;
    r.col1 = a.c1;
    r.row1 = a.r1;
    r.touches_border = a.border;
    t.objects.push_back(r);
  }
}

} // namespace wavestack::quantify
