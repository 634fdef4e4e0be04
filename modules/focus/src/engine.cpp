#include "engine.hpp"

#include "wavestack/core/units.hpp"

#include <cstring>

namespace wavestack::focus::detail {

namespace {

bool positive_finite(double v) { return std::isfinite(v) && v > 0.0; }

} // namespace

Engine::Engine(std::size_t h_, std::size_t w_, const Grid& grid_, double from, double to, double step_,
               double pad_factor, bool band_limit, Background background_, int refine_levels)
    : h(h_), w(w_), grid(grid_), step(step_), background(background_), levels(refine_levels) {
  if (h == 0 || w == 0) fail_config("focus search: the field is empty");
  if (!std::isfinite(from) || !std::isfinite(to)) fail_config("focus search: from and to must be finite lengths");
  if (!positive_finite(step)) fail_config("focus search: the step must be a positive length");
  if (!(to > from))
    fail_config("focus search: 'to' (" + format_length(to) + ") must be larger than 'from' (" + format_length(from) +
                ")");
  if (refine_levels < 0 || refine_levels > 20) fail_config("focus search: refine_levels must be 0..20");
  const double count = std::floor((to - from) / step + 1e-9) + 1;
  if (count < 3)
    fail_config("focus search: the range " + format_length(from) + " .. " + format_length(to) + " with step " +
                format_length(step) + " has fewer than 3 planes");
  if (count > 100000) fail_config("focus search: more than 100000 planes; use a larger step");
  const std::size_t s = static_cast<std::size_t>(count);
  propagate::AngularSpectrumOptions opt;
  opt.pad_factor = pad_factor;
  opt.band_limit = band_limit;
  distances.reserve(s);
  planes.reserve(s);
  for (std::size_t i = 0; i < s; ++i) {
    distances.push_back(from + static_cast<double>(i) * step);
    planes.emplace_back(h, w, grid, distances.back(), opt);
  }
  ph = planes.front().padded_height();
  pw = planes.front().padded_width();
  offsets.reserve(2 * static_cast<std::size_t>(levels));
  double hh = step;
  for (int j = 0; j < levels; ++j) {
    hh /= 2;
    offsets.emplace_back(h, w, grid, -hh, opt);
    offsets.emplace_back(h, w, grid, +hh, opt);
  }
}

EngineWorkspace Engine::make_workspace(const MetricEvaluator& ev, bool map, std::size_t threads) const {
  EngineWorkspace ws;
  ws.input = Image<cfloat>(h, w);
  ws.spectrum = planes.front().make_spectrum();
  ws.moved = planes.front().make_spectrum();
  if (threads == 0) threads = static_cast<std::size_t>(std::max(1, tbb::this_task_arena::max_concurrency()));
  ws.slots.resize(threads);
  for (Slot& s : ws.slots) {
    s.prop = planes.front().make_workspace();
    s.out = Image<cfloat>(h, w);
    s.scratch = ev.make_scratch();
    if (map) s.map = Image<float>(h, w, 0.0f);
  }
  return ws;
}

void Engine::prepare(ImageView<const cfloat> field, EngineWorkspace& ws) const {
  if (field.height() != h || field.width() != w)
    fail_internal("focus search: the field is " + std::to_string(field.height()) + "x" +
                  std::to_string(field.width()) + ", the search was planned for " + std::to_string(h) + "x" +
                  std::to_string(w));
  std::complex<double> sum(0, 0);
  double power = 0;
  for (std::size_t y = 0; y < h; ++y) {
    const cfloat* r = field.row(y);
    double sr = 0, si = 0, sp = 0;
    for (std::size_t x = 0; x < w; ++x) {
      sr += r[x].real();
      si += r[x].imag();
      sp += static_cast<double>(r[x].real()) * r[x].real() + static_cast<double>(r[x].imag()) * r[x].imag();
    }
    sum += std::complex<double>(sr, si);
    power += sp;
  }
  ws.rms = std::sqrt(power / static_cast<double>(h * w));
  sum = background == Background::mean ? sum / static_cast<double>(h * w) : std::complex<double>(0, 0);
  ws.background = cfloat(static_cast<float>(sum.real()), static_cast<float>(sum.imag()));
  for (std::size_t y = 0; y < h; ++y) {
    const cfloat* r = field.row(y);
    cfloat* o = ws.input.row(y);
    for (std::size_t x = 0; x < w; ++x) o[x] = r[x] - ws.background;
  }
  planes.front().forward_spectrum(ws.input, ws.spectrum, ws.slots.front().prop);
}

void Engine::move_spectrum(EngineWorkspace& ws, const Image<cfloat>& t, bool from_spectrum) const {
  const float n = static_cast<float>(static_cast<double>(ph) * static_cast<double>(pw));
  const float* src = reinterpret_cast<const float*>(from_spectrum ? ws.spectrum.data() : ws.moved.data());
  const float* tt = reinterpret_cast<const float*>(t.data());
  float* dst = reinterpret_cast<float*>(ws.moved.data());
  const std::size_t count = t.size();
  for (std::size_t i = 0; i < count; ++i) {
    const float a = src[2 * i], b = src[2 * i + 1], c = tt[2 * i] * n, d = tt[2 * i + 1] * n;
    dst[2 * i] = a * c - b * d;
    dst[2 * i + 1] = a * d + b * c;
  }
}

} // namespace wavestack::focus::detail
