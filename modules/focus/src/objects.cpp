#include "wavestack/focus/objects.hpp"

#include "engine.hpp"

#include <opencv2/core.hpp>
#include <opencv2/imgproc.hpp>

#include <algorithm>
#include <cmath>
#include <limits>

namespace wavestack::focus {

namespace {
constexpr double nan = std::numeric_limits<double>::quiet_NaN();
}

struct ObjectFocuser::Impl {
  Metric metric;
  detail::Engine engine;
  MetricEvaluator frame_eval;
  std::size_t tile, block, tiles_y, tiles_x;

  Impl(std::size_t h, std::size_t w, const Grid& grid, double from, double to, double step, const ObjectOptions& oo)
      : metric(resolve(oo.search.metric)),
        engine(h, w, grid, from, to, step, oo.search.pad_factor, oo.search.band_limit, oo.search.background,
               oo.search.refine_levels),
        frame_eval(metric, h, w, Roi{}, grid), tile(oo.tile), block(oo.search.split_tile),
        tiles_y((h + oo.tile - 1) / oo.tile), tiles_x((w + oo.tile - 1) / oo.tile) {}
};

struct ObjectFocuser::Workspace::Data {
  detail::EngineWorkspace ew;
  std::vector<Moments> store; ///< S × tiles
  std::vector<double> split;  ///< S
  std::vector<double> curve;  ///< S (object curves)
  std::vector<float> sorted;  ///< h·w, median/MAD
  std::vector<unsigned char> hole;
  std::vector<int> keep;      ///< labels of the kept components
  cv::Mat blurred, mask, inverse, labels, stats, centroids, hole_labels, hole_stats, hole_centroids;
};

ObjectFocuser::Workspace::Workspace() = default;
ObjectFocuser::Workspace::~Workspace() = default;
ObjectFocuser::Workspace::Workspace(Workspace&&) noexcept = default;
ObjectFocuser::Workspace& ObjectFocuser::Workspace::operator=(Workspace&&) noexcept = default;

ObjectFocuser::ObjectFocuser(std::size_t h, std::size_t w, const Grid& grid, double from, double to, double step,
                             ObjectOptions options)
    : options_(options) {
  const SearchOptions& o = options.search;
  if (!is_moment_metric(o.metric))
    fail_config("object focus: the metric '" + std::string(info(o.metric).name) +
                "' cannot be summed over tiles; choose a moment metric such as tamura-gradient");
  if (!(o.min_snr >= 0) || !(o.flat_tolerance >= 0)) fail_config("object focus: min_snr and flat_tolerance must be >= 0");
  if (options_.search.split_tile == 0) options_.search.split_tile = split_block_for(grid, o.band);
  if (options.tile == 0) fail_config("object focus: tile must be at least 1 pixel");
  if (!(options.threshold > 0)) fail_config("object focus: threshold must be positive");
  if (!(options.min_contrast >= 0 && options.min_contrast < 1)) fail_config("object focus: min_contrast must be in [0, 1)");
  if (!(options.smooth_px >= 0 && std::isfinite(options.smooth_px))) fail_config("object focus: smooth_px must be >= 0");
  if (!options.frame_roi.whole() &&
      (options.frame_roi.y + options.frame_roi.height > h || options.frame_roi.x + options.frame_roi.width > w))
    fail_config("object focus: frame_roi must lie inside the frame");
  if (options.min_area == 0 || options.max_objects == 0)
    fail_config("object focus: min_area and max_objects must be at least 1");
  impl_ = std::make_unique<Impl>(h, w, grid, from, to, step, options_);
}

ObjectFocuser::~ObjectFocuser() = default;
ObjectFocuser::ObjectFocuser(ObjectFocuser&&) noexcept = default;
ObjectFocuser& ObjectFocuser::operator=(ObjectFocuser&&) noexcept = default;

std::size_t ObjectFocuser::planes() const noexcept { return impl_->engine.distances.size(); }
std::span<const double> ObjectFocuser::distances() const noexcept { return impl_->engine.distances; }

ObjectFocuser::Workspace ObjectFocuser::make_workspace() const {
  const Impl& m = *impl_;
  Workspace ws;
  ws.d = std::make_unique<Workspace::Data>();
  Workspace::Data& d = *ws.d;
  d.ew = m.engine.make_workspace(m.frame_eval, true);
  const std::size_t s = planes();
  d.store.assign(2 * s * m.tiles_y * m.tiles_x, Moments{});
  d.split.assign(s, nan);
  d.curve.assign(s, nan);
  d.sorted.resize(m.engine.h * m.engine.w);
  const int h = static_cast<int>(m.engine.h), w = static_cast<int>(m.engine.w);
  d.blurred.create(h, w, CV_32F);
  d.mask.create(h, w, CV_8U);
  d.inverse.create(h, w, CV_8U);
  d.labels.create(h, w, CV_32S);
  d.hole_labels.create(h, w, CV_32S);
  d.keep.reserve(options_.max_objects);
  return ws;
}

namespace {

/// Sum the moments of tile rows [ty0, ty1) and columns [tx0, tx1) into the
/// two checkerboard halves (each tile holds its even and its odd blocks).
void halves(const Moments* t, std::size_t tiles_x, std::size_t ty0, std::size_t ty1, std::size_t tx0,
            std::size_t tx1, Moments& a, Moments& b) {
  a = b = Moments{};
  for (std::size_t ty = ty0; ty < ty1; ++ty)
    for (std::size_t tx = tx0; tx < tx1; ++tx) {
      a += t[2 * (ty * tiles_x + tx)];
      b += t[2 * (ty * tiles_x + tx) + 1];
    }
}

/// Median of v[0..n) (reordered).
float median_of(std::vector<float>& v) {
  const std::size_t m = v.size() / 2;
  std::nth_element(v.begin(), v.begin() + static_cast<std::ptrdiff_t>(m), v.end());
  return v[m];
}

} // namespace

void ObjectFocuser::run(ImageView<const cfloat> field, ObjectTable& out, Workspace& ws) const {
  const Impl& m = *impl_;
  if (!ws.d || ws.d->store.size() != 2 * planes() * m.tiles_y * m.tiles_x)
    fail_internal("object focus: the workspace was made by another focuser");
  Workspace::Data& d = *ws.d;
  const detail::Engine& e = m.engine;
  const std::size_t s = planes(), h = e.h, w = e.w, nt = 2 * m.tiles_y * m.tiles_x; // two entries per tile
  const SearchOptions& so = options_.search;
  e.prepare(field, d.ew);
  for (auto& slot : d.ew.slots) slot.map.fill(0.0f);

  // 1. One sweep: tile moments of every plane and the max-projection map.
  e.sweep(0, s - 1, d.ew, [&](std::size_t i, detail::Slot& slot, cfloat bz) {
    Moments* t = d.store.data() + i * nt;
    std::fill(t, t + nt, Moments{});
    m.frame_eval.accumulate(slot.out, bz, 0, 0, h, w, m.tile, 0, 0, m.tiles_x, t, slot.map, slot.scratch, m.block);
  });
  Image<float>& map = d.ew.slots.front().map;
  for (std::size_t k = 1; k < d.ew.slots.size(); ++k) {
    const float* o = d.ew.slots[k].map.data();
    float* p = map.data();
    for (std::size_t i = 0; i < map.size(); ++i) p[i] = std::max(p[i], o[i]);
  }

  // Curve of a tile box, judged and refined; `roi` for the refinement.
  auto focus_box = [&](std::size_t ty0, std::size_t ty1, std::size_t tx0, std::size_t tx1, const Roi& roi,
                       std::vector<double>& curve, FocusResult* full, ObjectFocus* row) {
    for (std::size_t i = 0; i < s; ++i) {
      Moments a, b;
      halves(d.store.data() + i * nt, m.tiles_x, ty0, ty1, tx0, tx1, a, b);
      Moments all = a;
      all += b;
      curve[i] = metric_value(m.metric, all);
      d.split[i] = 0.5 * (metric_value(m.metric, a) - metric_value(m.metric, b));
    }
    const CurveVerdict v = judge_curve(curve, d.split, m.metric, so, metric_level(m.metric, d.ew.rms));
    double distance = nan;
    std::size_t evaluations = 0;
    if (v.sure) {
      const MetricEvaluator ev(m.metric, h, w, roi, e.grid);
      const detail::Refined rf = e.refine(v.peak, v.sign, curve[v.peak - 1], curve[v.peak], curve[v.peak + 1], d.ew,
                                          [&](detail::Slot& slot, cfloat bz) { return ev(slot.out, bz, slot.scratch); });
      distance = rf.distance;
      evaluations = rf.evaluations;
    }
    if (full) {
      full->distance = distance;
      full->confidence = v.confidence;
      full->sure = v.sure;
      full->reason = v.reason;
      full->sign = v.sign;
      full->snr = v.snr;
      full->peak = v.peak;
      full->first = 0;
      full->last = s - 1;
      full->propagations = s + evaluations;
    }
    if (row) {
      row->distance = distance;
      row->confidence = v.confidence;
      row->sure = v.sure;
      row->reason = v.reason;
      row->sign = v.sign;
      row->snr = v.snr;
    }
  };

  // 2. The whole frame.
  out.frame.distances.assign(e.distances.begin(), e.distances.end());
  out.frame.curve.resize(s);
  {
    const Roi& fr = options_.frame_roi;
    const std::size_t t = m.tile;
    std::size_t ty0 = 0, ty1 = m.tiles_y, tx0 = 0, tx1 = m.tiles_x;
    Roi box{};
    if (!fr.whole()) { // whole tiles inside the region
      ty0 = std::min(m.tiles_y - 1, (fr.y + t - 1) / t);
      tx0 = std::min(m.tiles_x - 1, (fr.x + t - 1) / t);
      ty1 = std::max(ty0 + 1, std::min(m.tiles_y, (fr.y + fr.height) / t)); // at least one tile
      tx1 = std::max(tx0 + 1, std::min(m.tiles_x, (fr.x + fr.width) / t));
      box = Roi{ty0 * t, tx0 * t, std::min(h, ty1 * t) - ty0 * t, std::min(w, tx1 * t) - tx0 * t};
    }
    focus_box(ty0, ty1, tx0, tx1, box, out.frame.curve, &out.frame, nullptr);
  }

  // 3. Segmentation of the map.
  const int hi = static_cast<int>(h), wi = static_cast<int>(w);
  const cv::Mat mapm(hi, wi, CV_32F, map.data());
  if (options_.smooth_px > 0)
    cv::GaussianBlur(mapm, d.blurred, cv::Size(0, 0), options_.smooth_px, options_.smooth_px, cv::BORDER_REFLECT);
  else
    mapm.copyTo(d.blurred);
  std::copy(d.blurred.ptr<float>(), d.blurred.ptr<float>() + h * w, d.sorted.begin());
  const float med = median_of(d.sorted);
  float top = med;
  for (float& v : d.sorted) {
    top = std::max(top, v);
    v = std::abs(v - med);
  }
  const float mad = median_of(d.sorted);
  const double thr = std::max(med + options_.threshold * 1.4826 * mad, med + options_.min_contrast * (top - med));
  out.objects.clear();
  out.curves.clear();
  if (!(top > med) || !(top > thr)) return;
  cv::compare(d.blurred, thr, d.mask, cv::CMP_GT);
  // Fill holes: background components that do not touch the frame border.
  cv::bitwise_not(d.mask, d.inverse);
  const int nh = cv::connectedComponentsWithStats(d.inverse, d.hole_labels, d.hole_stats, d.hole_centroids, 4, CV_32S);
  d.hole.assign(static_cast<std::size_t>(nh), 0);
  for (int l = 1; l < nh; ++l) {
    const int x = d.hole_stats.at<int>(l, cv::CC_STAT_LEFT), y = d.hole_stats.at<int>(l, cv::CC_STAT_TOP);
    const int bw = d.hole_stats.at<int>(l, cv::CC_STAT_WIDTH), bh = d.hole_stats.at<int>(l, cv::CC_STAT_HEIGHT);
    d.hole[static_cast<std::size_t>(l)] = x > 0 && y > 0 && x + bw < wi && y + bh < hi;
  }
  for (int y = 0; y < hi; ++y) {
    const int* lab = d.hole_labels.ptr<int>(y);
    unsigned char* mk = d.mask.ptr<unsigned char>(y);
    for (int x = 0; x < wi; ++x)
      if (d.hole[static_cast<std::size_t>(lab[x])]) mk[x] = 255;
  }
  const int n = cv::connectedComponentsWithStats(d.mask, d.labels, d.stats, d.centroids, 8, CV_32S);
  d.keep.clear();
  for (int l = 1; l < n; ++l)
    if (static_cast<std::size_t>(d.stats.at<int>(l, cv::CC_STAT_AREA)) >= options_.min_area) d.keep.push_back(l);
  if (d.keep.size() > options_.max_objects) {
    std::partial_sort(d.keep.begin(), d.keep.begin() + static_cast<std::ptrdiff_t>(options_.max_objects),
                      d.keep.end(), [&](int a, int b) {
                        return d.stats.at<int>(a, cv::CC_STAT_AREA) > d.stats.at<int>(b, cv::CC_STAT_AREA);
                      });
    d.keep.resize(options_.max_objects);
    std::sort(d.keep.begin(), d.keep.end());
  }

  // 4. Focus each object in its box.
  const std::size_t t = m.tile, margin = options_.margin;
  for (const int l : d.keep) {
    ObjectFocus row;
    row.id = static_cast<int>(out.objects.size()) + 1;
    row.centroid_x = d.centroids.at<double>(l, 0);
    row.centroid_y = d.centroids.at<double>(l, 1);
    row.centroid_x_m = row.centroid_x * e.grid.dx;
    row.centroid_y_m = row.centroid_y * e.grid.dy;
    row.area = static_cast<std::size_t>(d.stats.at<int>(l, cv::CC_STAT_AREA));
    const std::size_t x0 = static_cast<std::size_t>(d.stats.at<int>(l, cv::CC_STAT_LEFT));
    const std::size_t y0 = static_cast<std::size_t>(d.stats.at<int>(l, cv::CC_STAT_TOP));
    const std::size_t x1 = x0 + static_cast<std::size_t>(d.stats.at<int>(l, cv::CC_STAT_WIDTH));
    const std::size_t y1 = y0 + static_cast<std::size_t>(d.stats.at<int>(l, cv::CC_STAT_HEIGHT));
    const std::size_t ty0 = (y0 > margin ? y0 - margin : 0) / t, tx0 = (x0 > margin ? x0 - margin : 0) / t;
    const std::size_t ty1 = std::min(m.tiles_y, (std::min(h, y1 + margin) + t - 1) / t);
    const std::size_t tx1 = std::min(m.tiles_x, (std::min(w, x1 + margin) + t - 1) / t);
    row.box = Roi{ty0 * t, tx0 * t, std::min(h, ty1 * t) - ty0 * t, std::min(w, tx1 * t) - tx0 * t};
    focus_box(ty0, ty1, tx0, tx1, row.box, d.curve, nullptr, &row);
    out.objects.push_back(row);
    out.curves.insert(out.curves.end(), d.curve.begin(), d.curve.end());
  }
}

} // namespace wavestack::focus
