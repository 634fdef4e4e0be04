#include "wavestack/focus/search.hpp"

#include "engine.hpp"

#include <algorithm>
#include <cmath>
#include <cstring>
#include <limits>

namespace wavestack::focus {

namespace {

constexpr double nan = std::numeric_limits<double>::quiet_NaN();

/// Median of v (reordered in place).
double median(std::vector<double>& v) {
  if (v.empty()) return nan;
  const std::size_t m = v.size() / 2;
  std::nth_element(v.begin(), v.begin() + static_cast<std::ptrdiff_t>(m), v.end());
  double med = v[m];
  if (v.size() % 2 == 0) med = 0.5 * (med + *std::max_element(v.begin(), v.begin() + static_cast<std::ptrdiff_t>(m)));
  return med;
}

/// Topographic prominence of the local maximum at j of g (scipy.signal
/// peak_prominences' definition): walk each side until a strictly higher
/// value or the end, take the lowest value on each walk, prominence = g[j] -
/// the higher of the two lows.
double prominence_at(std::span<const double> g, std::size_t j) {
  double lmin = g[j], rmin = g[j];
  for (std::size_t k = j; k-- > 0;) {
    if (g[k] > g[j]) break;
    lmin = std::min(lmin, g[k]);
  }
  for (std::size_t k = j + 1; k < g.size(); ++k) {
    if (g[k] > g[j]) break;
    rmin = std::min(rmin, g[k]);
  }
  return g[j] - std::max(lmin, rmin);
}

std::vector<double>& scratch_a() {
  thread_local std::vector<double> v;
  return v;
}
std::vector<double>& scratch_b() {
  thread_local std::vector<double> v;
  return v;
}

} // namespace

const char* to_string(Unsure u) noexcept {
  switch (u) {
  case Unsure::none: return "sure";
  case Unsure::edge: return "extremum at the edge of the range";
  case Unsure::flat: return "flat curve";
  case Unsure::noise: return "peak at noise level";
  case Unsure::invalid: return "invalid curve";
  case Unsure::no_object: return "no object found";
  }
  return "?";
}

CurveVerdict analyse_curve(std::span<const double> curve, std::span<const double> split, int sign,
                           const SearchOptions& options, double level) {
  CurveVerdict v;
  v.sign = sign >= 0 ? +1 : -1;
  const std::size_t n = curve.size();
  if (n < 3) return v;
  std::vector<double>& g = scratch_a();
  g.resize(n);
  double scale = 0;
  for (std::size_t i = 0; i < n; ++i) {
    if (!std::isfinite(curve[i])) return v; // invalid
    g[i] = v.sign * curve[i];
    scale = std::max(scale, std::abs(curve[i]));
  }
  scale = std::max(scale, std::isfinite(level) ? std::abs(level) : 0.0);
  const std::span<const double> gs(g);
  v.peak = static_cast<std::size_t>(std::max_element(g.begin(), g.end()) - g.begin());
  const double gmax = g[v.peak], gmin = *std::min_element(g.begin(), g.end());
  v.prominence = prominence_at(gs, v.peak);

  // Second largest prominence among the other local maxima (ends included).
  double p2 = 0;
  for (std::size_t j = 0; j < n; ++j) {
    if (j == v.peak) continue;
    const bool left_ok = j == 0 || g[j] > g[j - 1];
    const bool right_ok = j + 1 == n || g[j] >= g[j + 1];
    if (left_ok && right_ok) p2 = std::max(p2, prominence_at(gs, j));
  }
  v.dominance = v.prominence > 0 ? std::clamp(1.0 - p2 / v.prominence, 0.0, 1.0) : 0.0;

  // Noise of the curve.
  std::vector<double>& t = scratch_b();
  bool have_split = split.size() == n;
  for (std::size_t i = 0; have_split && i < n; ++i) have_split = std::isfinite(split[i]);
  if (have_split) {
    // An object shared unevenly by the two halves leaves a copy of its own
    // curve, scaled, in the split: remove the least-squares fit split ≈ α +
    // β·curve, keep the residual (for noise, β ≈ 0 and this is the split).
    double mc = 0, ms = 0;
    for (std::size_t i = 0; i < n; ++i) {
      mc += curve[i];
      ms += split[i];
    }
    mc /= static_cast<double>(n);
    ms /= static_cast<double>(n);
    double scc = 0, scs = 0;
    for (std::size_t i = 0; i < n; ++i) {
      scc += (curve[i] - mc) * (curve[i] - mc);
      scs += (curve[i] - mc) * (split[i] - ms);
    }
    const double beta = scc > 0 ? scs / scc : 0.0;
    t.resize(n);
    for (std::size_t i = 0; i < n; ++i) t[i] = split[i] - ms - beta * (curve[i] - mc);
    const double med = median(t);
    for (std::size_t i = 0; i < n; ++i) t[i] = std::abs(split[i] - ms - beta * (curve[i] - mc) - med);
    v.noise = 1.4826 * median(t);
  } else {
    t.resize(n - 2);
    for (std::size_t i = 1; i + 1 < n; ++i) t[i - 1] = std::abs(g[i - 1] - 2 * g[i] + g[i + 1]);
    v.noise = 1.4826 * median(t) / std::sqrt(6.0);
  }
  v.noise = std::max({v.noise, 1e-7 * scale, std::numeric_limits<double>::min()});
  v.snr = v.prominence / v.noise;

  if (gmax - gmin <= options.flat_tolerance * scale)
    v.reason = Unsure::flat;
  else if (v.peak == 0 || v.peak + 1 == n)
    v.reason = Unsure::edge;
  else if (!(v.snr >= options.min_snr))
    v.reason = Unsure::noise;
  else
    v.reason = Unsure::none;
  v.sure = v.reason == Unsure::none;
  v.confidence = v.sure ? v.dominance * (1.0 - std::exp(-v.snr / std::max(options.min_snr, 1e-12))) : 0.0;
  return v;
}

double metric_level(Metric metric, double rms) noexcept {
  switch (resolve(metric)) {
  case Metric::integrated_amplitude: return rms;
  case Metric::amplitude_variance:
  case Metric::gradient_energy:
  case Metric::laplacian_variance: return rms * rms;
  default: return 1.0;
  }
}

CurveVerdict judge_curve(std::span<const double> curve, std::span<const double> split, Metric metric,
                         const SearchOptions& options, double level) {
  int signs[2] = {+1, 0};
  switch (options.extremum) {
  case Extremum::maximum: break;
  case Extremum::minimum: signs[0] = -1; break;
  case Extremum::automatic:
    switch (info(resolve(metric)).sense) {
    case Sense::maximum: break;
    case Sense::minimum: signs[0] = -1; break;
    case Sense::depends: signs[1] = -1; break;
    }
  }
  CurveVerdict best = analyse_curve(curve, split, signs[0], options, level);
  if (signs[1] != 0) {
    const CurveVerdict other = analyse_curve(curve, split, signs[1], options, level);
    if ((other.sure && !best.sure) || (other.sure == best.sure && other.snr > best.snr)) best = other;
  }
  return best;
}

std::size_t split_block_for(const Grid& grid, double band) {
  const double pitch = std::min(grid.dx, grid.dy);
  if (!(pitch > 0) || !std::isfinite(pitch)) return 2;
  const double nyquist = 0.5 / pitch;
  if (!(band > 0) || !std::isfinite(band) || band > nyquist) band = nyquist;
  const double px = 0.61 / (band * pitch);
  return std::max<std::size_t>(2, static_cast<std::size_t>(std::ceil(px - 1e-9)));
}

// --- Search -----------------------------------------------------------------

Search::Workspace::Workspace() = default;
Search::Workspace::~Workspace() = default;
Search::Workspace::Workspace(Workspace&&) noexcept = default;
Search::Workspace& Search::Workspace::operator=(Workspace&&) noexcept = default;

std::vector<const void*> Search::Workspace::buffers() const {
  std::vector<const void*> b;
  if (engine) {
    b.push_back(engine->padded.data());
    b.push_back(engine->spectrum.data());
    b.push_back(engine->moved.data());
    for (const auto& s : engine->slots) {
      b.push_back(s.buf.data());
      b.push_back(s.scratch.row.data());
      b.push_back(s.scratch.amplitude.data());
      b.push_back(s.scratch.spectrum.data());
    }
  }
  b.push_back(halves.data());
  b.push_back(split.data());
  return b;
}

Search::Search(std::size_t h, std::size_t w, const Grid& grid, double from, double to, double step,
               SearchOptions options)
    : options_(options), metric_(resolve(options.metric)) {
  if (!(options.min_snr >= 0) || !(options.flat_tolerance >= 0))
    fail_config("focus search: min_snr and flat_tolerance must be >= 0");
  if (options_.split_tile == 0) options_.split_tile = split_block_for(grid, options_.band);
  evaluator_ = std::make_unique<MetricEvaluator>(metric_, h, w, options.roi, grid, options.spectral_band_low,
                                                 options.spectral_band_high);
  engine_ = std::make_shared<detail::Engine>(h, w, grid, from, to, step, options.pad_factor, options.band_limit,
                                             options.background, options.refine_levels);
}

Search::~Search() = default;
Search::Search(Search&&) noexcept = default;
Search& Search::operator=(Search&&) noexcept = default;

std::size_t Search::planes() const noexcept { return engine_->distances.size(); }
std::span<const double> Search::distances() const noexcept { return engine_->distances; }
double Search::step() const noexcept { return engine_->step; }
std::size_t Search::height() const noexcept { return engine_->h; }
std::size_t Search::width() const noexcept { return engine_->w; }
std::size_t Search::padded_height() const noexcept { return engine_->ph; }
std::size_t Search::padded_width() const noexcept { return engine_->pw; }

std::size_t Search::nearest_plane(double distance) const noexcept {
  const double k = std::round((distance - engine_->distances.front()) / engine_->step);
  if (!(k > 0)) return 0;
  return std::min(planes() - 1, static_cast<std::size_t>(k));
}

Search::Workspace Search::make_workspace() const {
  Workspace ws;
  ws.engine = std::make_unique<detail::EngineWorkspace>(engine_->make_workspace(*evaluator_, false));
  ws.halves.assign(2 * planes(), Moments{});
  ws.split.assign(planes(), nan);
  return ws;
}

FocusResult Search::run(ImageView<const cfloat> field, Workspace& ws) const {
  FocusResult r;
  run(field, r, ws);
  return r;
}

void Search::run(ImageView<const cfloat> field, FocusResult& out, Workspace& ws) const {
  run_window(field, 0, planes() - 1, out, ws);
}

void Search::run_window(ImageView<const cfloat> field, std::size_t first, std::size_t last, FocusResult& out,
                        Workspace& ws) const {
  const std::size_t s = planes();
  if (!(first <= last && last < s && last - first >= 2))
    fail_internal("focus search: the window [" + std::to_string(first) + ", " + std::to_string(last) +
                  "] is not 3 or more planes of 0.." + std::to_string(s - 1));
  if (!ws.engine || ws.halves.size() != 2 * s) fail_internal("focus search: the workspace was made by another search");
  const detail::Engine& e = *engine_;
  detail::EngineWorkspace& ew = *ws.engine;
  e.prepare(field, ew);

  out.distances.assign(e.distances.begin(), e.distances.end());
  out.curve.assign(s, nan);
  std::fill(ws.split.begin(), ws.split.end(), nan);
  const std::size_t tile = options_.split_tile;
  const bool spectral = metric_ == Metric::spectral_energy;

  e.sweep(first, last, ew, [&](std::size_t i, detail::Slot& slot, cfloat bz) {
    if (spectral) {
      out.curve[i] = (*evaluator_)(slot.out, bz, slot.scratch, &ws.split[i]);
      return;
    }
    Moments a, b;
    evaluator_->accumulate_split(slot.out, bz, tile, a, b, slot.scratch);
    Moments all = a;
    all += b;
    out.curve[i] = metric_value(metric_, all);
    ws.split[i] = 0.5 * (metric_value(metric_, a) - metric_value(metric_, b));
  });

  const std::size_t n = last - first + 1;
  const std::span<const double> c(out.curve.data() + first, n);
  const std::span<const double> sp(ws.split.data() + first, n);
  const CurveVerdict v = judge_curve(c, sp, metric_, options_, metric_level(metric_, ew.rms));
  out.first = first;
  out.last = last;
  out.peak = first + v.peak;
  out.sign = v.sign;
  out.sure = v.sure;
  out.reason = v.reason;
  out.snr = v.snr;
  out.confidence = v.confidence;
  out.distance = nan;
  out.propagations = n;
  if (v.sure) {
    const std::size_t p = out.peak;
    const detail::Refined rf = e.refine(p, v.sign, out.curve[p - 1], out.curve[p], out.curve[p + 1], ew,
                                        [&](detail::Slot& slot, cfloat bz) {
                                          return (*evaluator_)(slot.out, bz, slot.scratch);
                                        });
    out.distance = rf.distance;
    out.propagations += rf.evaluations;
  }
}

} // namespace wavestack::focus
