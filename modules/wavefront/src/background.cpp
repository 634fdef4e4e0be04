#include "wavestack/wavefront/background.hpp"

#include "sampled_basis.hpp"
#include "wavestack/core/error.hpp"
#include "wavestack/core/log.hpp"
#include "wavestack/wavefront/zernike.hpp"

#include <algorithm>
#include <cmath>
#include <set>
#include <string>

namespace wavestack::wavefront {

struct BackgroundCompensator::Impl {
  Impl(detail::Support s, int J, const detail::SampledBasis::Eval& e) : basis(std::move(s), J, e) {}
  detail::SampledBasis basis;
  std::vector<std::string> names;
};

namespace {

constexpr std::size_t max_samples = 16384; // median SE ≈ 1.25σ/sqrt(n) = 0.01σ

void validate(std::size_t h, std::size_t w, const BackgroundOptions& o) {
  if (h < 2 || w < 2) fail_config("background compensation needs frames of at least 2x2 pixels");
  if (o.model == BackgroundModel::polynomial && (o.degree < 0 || o.degree > 8))
    fail_config("background polynomial degree must be 0..8, got " + std::to_string(o.degree));
  if (o.model == BackgroundModel::zernike) {
    if (o.zernike_terms.empty()) fail_config("the zernike background model needs at least one term");
    std::set<int> seen;
    const int max_j = terms_up_to_order(max_radial_order) - 1;
    for (int j : o.zernike_terms) {
      if (j < 0 || j > max_j)
        fail_config("background Zernike index " + std::to_string(j) + " is outside 0.." + std::to_string(max_j));
      if (!seen.insert(j).second) fail_config("background Zernike index " + std::to_string(j) + " is listed twice");
    }
  }
  if (o.iterations < 0 || o.iterations > 20) fail_config("background iterations must be 0..20");
  if (!(o.phase_sigmas > 0) || !(o.gradient_sigmas > 0) || !(o.amplitude_sigmas > 0))
    fail_config("background detection thresholds (sigmas) must be positive");
  if (!(o.phase_floor >= 0) || !(o.gradient_floor >= 0))
    fail_config("background detection floors must be >= 0");
  if (o.dilation < 0 || o.dilation > 64) fail_config("background dilation must be 0..64 pixels");
  if (!(o.min_background_fraction > 0 && o.min_background_fraction < 1))
    fail_config("min_background_fraction must lie strictly between 0 and 1");
  if (!o.mask.empty() && (o.mask.height() != h || o.mask.width() != w))
    fail_config("the background mask is " + std::to_string(o.mask.height()) + "x" + std::to_string(o.mask.width()) +
                ", frames are " + std::to_string(h) + "x" + std::to_string(w));
  if (o.region == BackgroundRegion::mask && o.mask.empty())
    fail_config("background region \"mask\" needs a mask image");
}

std::string monomial_name(int a, int b) {
  if (a == 0 && b == 0) return "1";
  std::string s;
  if (a > 0) s += a == 1 ? "x" : "x^" + std::to_string(a);
  if (b > 0) {
    if (!s.empty()) s += " ";
    s += b == 1 ? "y" : "y^" + std::to_string(b);
  }
  return s;
}

/// Median and normal-consistent robust σ (1.4826·MAD) of `v` (reordered).
void robust_stats(std::vector<float>& v, double& median, double& sigma) {
  if (v.empty()) {
    median = 0;
    sigma = 0;
    return;
  }
  const std::size_t mid = v.size() / 2;
  std::nth_element(v.begin(), v.begin() + static_cast<long>(mid), v.end());
  median = v[mid];
  for (float& x : v) x = static_cast<float>(std::abs(static_cast<double>(x) - median));
  std::nth_element(v.begin(), v.begin() + static_cast<long>(mid), v.end());
  sigma = 1.4826 * v[mid];
}

/// Square dilation of the 0/1 image `in` by d pixels into `out`, through `tmp`.
void dilate(const Image<std::uint8_t>& in, Image<std::uint8_t>& tmp, Image<std::uint8_t>& out, int d,
            std::vector<int>& counts) {
  const std::size_t h = in.height(), w = in.width();
  if (d == 0) {
    out = in;
    return;
  }
  const long D = d, W = static_cast<long>(w), H = static_cast<long>(h);
  for (std::size_t y = 0; y < h; ++y) {
    const std::uint8_t* s = in.row(y);
    std::uint8_t* t = tmp.row(y);
    int count = 0;
    for (long x = 0; x <= std::min(D, W - 1); ++x) count += s[x];
    for (long x = 0; x < W; ++x) {
      t[x] = count > 0;
      if (x + D + 1 < W) count += s[x + D + 1];
      if (x - D >= 0) count -= s[x - D];
    }
  }
  counts.assign(w, 0); // no allocation: capacity reserved by make_workspace
  for (long y = 0; y <= std::min(D, H - 1); ++y) {
    const std::uint8_t* t = tmp.row(static_cast<std::size_t>(y));
    for (std::size_t x = 0; x < w; ++x) counts[x] += t[x];
  }
  for (long y = 0; y < H; ++y) {
    std::uint8_t* o = out.row(static_cast<std::size_t>(y));
    for (std::size_t x = 0; x < w; ++x) o[x] = counts[x] > 0;
    if (y + D + 1 < H) {
      const std::uint8_t* t = tmp.row(static_cast<std::size_t>(y + D + 1));
      for (std::size_t x = 0; x < w; ++x) counts[x] += t[x];
    }
    if (y - D >= 0) {
      const std::uint8_t* t = tmp.row(static_cast<std::size_t>(y - D));
      for (std::size_t x = 0; x < w; ++x) counts[x] -= t[x];
    }
  }
}

} // namespace

BackgroundCompensator::BackgroundCompensator(std::size_t height, std::size_t width, BackgroundOptions options)
    : h_(height), w_(width), J_(0), scale_(0), opt_(std::move(options)) {
  validate(height, width, opt_);
  const double cx = (static_cast<double>(width) - 1) / 2, cy = (static_cast<double>(height) - 1) / 2;
  scale_ = 0.5 * std::hypot(static_cast<double>(width) - 1, static_cast<double>(height) - 1);
  const double r = scale_, ys = opt_.y_axis == YAxis::up ? -1.0 : 1.0;
  zpupil_ = Pupil{cx, cy, scale_};
  std::vector<std::string> names;
  detail::SampledBasis::Eval eval;
  if (opt_.model == BackgroundModel::polynomial) {
    const int D = opt_.degree;
    J_ = (D + 1) * (D + 2) / 2;
    for (int d = 0; d <= D; ++d)
      for (int b = 0; b <= d; ++b) names.push_back(monomial_name(d - b, b));
    eval = [=](double col, double row, double* out) {
      const double x = (col - cx) / r, y = ys * (row - cy) / r;
      int k = 0;
      double xp[9], yp[9];
      xp[0] = yp[0] = 1;
      for (int i = 1; i <= D; ++i) {
        xp[i] = xp[i - 1] * x;
        yp[i] = yp[i - 1] * y;
      }
      for (int d = 0; d <= D; ++d)
        for (int b = 0; b <= d; ++b) out[k++] = xp[d - b] * yp[b];
    };
  } else {
    Pupil zp = opt_.zernike_pupil;
    if (std::isnan(zp.cx)) zp.cx = cx;
    if (std::isnan(zp.cy)) zp.cy = cy;
    if (zp.radius <= 0) zp.radius = scale_;
    if (!std::isfinite(zp.cx) || !std::isfinite(zp.cy) || !std::isfinite(zp.radius))
      fail_config("the background Zernike pupil must have a finite centre and radius");
    zpupil_ = zp;
    const double zx = zp.cx, zy = zp.cy, zr = zp.radius;
    const std::vector<int> terms = opt_.zernike_terms;
    J_ = static_cast<int>(terms.size());
    for (int j : terms) {
      // Appended piecewise: "Z" + std::to_string(j) draws a false -Wrestrict from GCC 12.
      std::string n("Z");
      n.append(std::to_string(j));
      if (!zernike_name(j).empty()) {
        n += ' ';
        n += zernike_name(j);
      }
      names.push_back(n);
    }
    const int top = *std::max_element(terms.begin(), terms.end());
    auto scratch = std::make_shared<std::vector<double>>(static_cast<std::size_t>(top + 1));
    eval = [=](double col, double row, double* out) {
      zernike_basis((col - zx) / zr, ys * (row - zy) / zr, *scratch);
      for (std::size_t k = 0; k < terms.size(); ++k) out[k] = (*scratch)[static_cast<std::size_t>(terms[k])];
    };
  }
  auto impl = std::make_shared<Impl>(detail::frame_support(height, width), J_, eval);
  impl->names = std::move(names);
  impl_ = std::move(impl);
}

BackgroundCompensator::~BackgroundCompensator() = default;
BackgroundCompensator::BackgroundCompensator(const BackgroundCompensator&) = default;
BackgroundCompensator& BackgroundCompensator::operator=(const BackgroundCompensator&) = default;

std::string BackgroundCompensator::term_name(int k) const {
  if (k < 0 || k >= J_) return {};
  return impl_->names[static_cast<std::size_t>(k)];
}

BackgroundCompensator::Workspace BackgroundCompensator::make_workspace() const {
  Workspace ws;
  ws.residual.resize(h_, w_);
  ws.gradient.resize(h_, w_);
  ws.candidates.resize(h_, w_);
  ws.background.resize(h_, w_);
  ws.objects.resize(h_, w_);
  ws.dilated.resize(h_, w_);
  ws.sample.reserve(max_samples + 1);
  ws.counts.reserve(w_);
  const std::size_t J = static_cast<std::size_t>(J_);
  ws.gram.resize(J * J);
  ws.factor.resize(J * J);
  ws.rhs.resize(J);
  ws.full.resize(J);
  return ws;
}

namespace {

/// Fit on the pixels where bg != 0 (nb of them); rhs receives the
/// coefficients on Q. `full` = Σ over finite pixels of q·φ. False when the
/// Gram matrix is not positive definite.
bool fit_on(const detail::SampledBasis& B, ImageView<const float> phase, const Image<std::uint8_t>& bg,
            std::size_t nb, BackgroundCompensator::Workspace& ws) {
  const std::size_t J = static_cast<std::size_t>(B.terms()), h = bg.height(), w = bg.width();
  double* G = ws.gram.data();
  double* b = ws.rhs.data();
  const bool complement = 2 * nb >= h * w;
  if (complement) {
    std::copy(B.gram().begin(), B.gram().end(), G);
    std::copy(ws.full.begin(), ws.full.end(), b);
  } else {
    std::fill(G, G + J * J, 0.0);
    std::fill(b, b + J, 0.0);
  }
  const double sign = complement ? -1.0 : 1.0;
  const std::uint8_t want = complement ? 0 : 1;
  const float* q = B.q();
  for (std::size_t y = 0; y < h; ++y) {
    const std::uint8_t* m = bg.row(y);
    const float* src = phase.row(y);
    for (std::size_t x = 0; x < w; ++x, q += J) {
      if ((m[x] != 0) != (want != 0)) continue;
      for (std::size_t r = 0; r < J; ++r) {
        const double v = sign * q[r];
        for (std::size_t c = 0; c <= r; ++c) G[r * J + c] += v * q[c];
      }
      const float f = src[x];
      if (std::isfinite(f)) {
        const double v = sign * static_cast<double>(f);
        for (std::size_t r = 0; r < J; ++r) b[r] += v * q[r];
      }
    }
  }
  for (std::size_t r = 0; r < J; ++r)
    for (std::size_t c = 0; c < r; ++c) G[c * J + r] = G[r * J + c];
  if (!detail::cholesky(G, ws.factor.data(), B.terms(), 1e-10)) return false;
  detail::cholesky_solve(ws.factor.data(), b, B.terms());
  return true;
}

void residual_image(const detail::SampledBasis& B, ImageView<const float> phase, const double* a,
                    Image<float>& res) {
  const std::size_t J = static_cast<std::size_t>(B.terms()), h = res.height(), w = res.width();
  const float* q = B.q();
  for (std::size_t y = 0; y < h; ++y) {
    const float* src = phase.row(y);
    float* dst = res.row(y);
    for (std::size_t x = 0; x < w; ++x, q += J) {
      double v = 0;
      for (std::size_t k = 0; k < J; ++k) v += a[k] * q[k];
      dst[x] = static_cast<float>(static_cast<double>(src[x]) - v);
    }
  }
}

/// |∇r|, central differences inside, one-sided at the edges.
void gradient_image(const Image<float>& r, Image<float>& g) {
  const std::size_t h = r.height(), w = r.width();
  for (std::size_t y = 0; y < h; ++y) {
    const float* up = r.row(y == 0 ? 0 : y - 1);
    const float* dn = r.row(y + 1 == h ? h - 1 : y + 1);
    const float* c = r.row(y);
    const float sy = (y == 0 || y + 1 == h) ? 1.0f : 0.5f;
    float* o = g.row(y);
    for (std::size_t x = 0; x < w; ++x) {
      const std::size_t xl = x == 0 ? 0 : x - 1, xr = x + 1 == w ? w - 1 : x + 1;
      const float sx = (x == 0 || x + 1 == w) ? 1.0f : 0.5f;
      const float gx = (c[xr] - c[xl]) * sx, gy = (dn[x] - up[x]) * sy;
      o[x] = std::sqrt(gx * gx + gy * gy);
    }
  }
}

/// Every k-th pixel (raster order) of `img` where sel(mask value) holds.
template <class Sel>
void sample(const Image<float>& img, const Image<std::uint8_t>& mask, std::size_t n, Sel sel, std::vector<float>& out) {
  out.clear();
  const std::size_t step = std::max<std::size_t>(1, n / max_samples);
  std::size_t i = 0;
  for (std::size_t p = 0; p < img.size(); ++p)
    if (sel(mask.data()[p])) {
      if (i % step == 0 && out.size() < max_samples) out.push_back(img.data()[p]);
      ++i;
    }
}

} // namespace

BackgroundFit BackgroundCompensator::apply(ImageView<const float> phase, ImageView<const float> amplitude,
                                           ImageView<float> out, std::span<double> coefficients,
                                           Workspace& ws) const {
  const std::string shape = std::to_string(h_) + "x" + std::to_string(w_);
  if (phase.height() != h_ || phase.width() != w_ || out.height() != h_ || out.width() != w_)
    fail_config("background compensation planned for " + shape + " frames");
  const bool have_amp = !amplitude.empty();
  if (have_amp && (amplitude.height() != h_ || amplitude.width() != w_))
    fail_config("the amplitude image must be " + shape);
  if (coefficients.size() != static_cast<std::size_t>(J_))
    fail_config("background fit has " + std::to_string(J_) + " coefficients, array holds " +
                std::to_string(coefficients.size()));
  if (ws.residual.height() != h_ || ws.residual.width() != w_ || ws.rhs.size() != static_cast<std::size_t>(J_))
    fail_config("background workspace was made for another compensator");

  const detail::SampledBasis& B = impl_->basis;
  const std::size_t J = static_cast<std::size_t>(J_), n = h_ * w_;
  const bool has_mask = !opt_.mask.empty();

  // Candidates (1) and amplitude objects among them (2); full projection.
  std::size_t nc = 0;
  std::fill(ws.full.begin(), ws.full.end(), 0.0);
  {
    const float* q = B.q();
    for (std::size_t y = 0; y < h_; ++y) {
      const float* src = phase.row(y);
      std::uint8_t* c = ws.candidates.row(y);
      for (std::size_t x = 0; x < w_; ++x, q += J) {
        const float f = src[x];
        const bool finite = std::isfinite(f);
        if (finite) {
          const double v = f;
          for (std::size_t k = 0; k < J; ++k) ws.full[k] += v * q[k];
        }
        bool ok = finite && (!has_mask || opt_.mask(y, x) != 0);
        if (ok && have_amp) ok = std::isfinite(amplitude(y, x));
        c[x] = ok;
        nc += ok;
      }
    }
  }
  if (nc < J)
    fail_input("only " + std::to_string(nc) + " finite background candidate pixels for a " + std::to_string(J) +
               "-term background fit");

  const bool automatic = opt_.region == BackgroundRegion::automatic;
  std::size_t nb = nc;
  ws.background = ws.candidates; // same size: no allocation
  if (automatic && have_amp) {
    // Amplitude statistics over the candidates; copy amplitudes into `gradient` as scratch.
    for (std::size_t y = 0; y < h_; ++y)
      for (std::size_t x = 0; x < w_; ++x) ws.gradient(y, x) = amplitude(y, x);
    double med = 0, sig = 0;
    sample(ws.gradient, ws.candidates, nc, [](std::uint8_t v) { return v != 0; }, ws.sample);
    robust_stats(ws.sample, med, sig);
    const double thr = std::max(opt_.amplitude_sigmas * sig, 1e-3 * std::abs(med));
    for (std::size_t p = 0; p < n; ++p) {
      std::uint8_t& c = ws.candidates.data()[p];
      const bool obj = c != 0 && !(std::abs(static_cast<double>(ws.gradient.data()[p]) - med) <= thr);
      ws.objects.data()[p] = obj;
      if (obj) c = 2;
    }
    dilate(ws.objects, ws.background, ws.dilated, opt_.dilation, ws.counts);
    nb = 0;
    for (std::size_t p = 0; p < n; ++p) {
      const bool b = ws.candidates.data()[p] != 0 && ws.dilated.data()[p] == 0;
      ws.background.data()[p] = b;
      nb += b;
    }
    if (nb < std::max<std::size_t>(J, static_cast<std::size_t>(opt_.min_background_fraction * static_cast<double>(nc)))) {
      log::warn("background detection: the amplitude test leaves too little background; using every candidate pixel",
                "wavefront.background.amplitude");
      ws.background = ws.candidates;
      for (std::size_t p = 0; p < n; ++p) ws.background.data()[p] = ws.background.data()[p] != 0;
      nb = nc;
    }
  }

  BackgroundFit info;
  const std::size_t min_nb =
      std::max<std::size_t>(J, static_cast<std::size_t>(opt_.min_background_fraction * static_cast<double>(nc)));
  const double* a = ws.rhs.data();
  for (int it = 0; automatic && it < opt_.iterations; ++it) {
    if (!fit_on(B, phase, ws.background, nb, ws)) {
      if (it == 0) fail_input("the background fit is degenerate on the " + std::to_string(nb) + " candidate pixels");
      break;
    }
    residual_image(B, phase, a, ws.residual);
    gradient_image(ws.residual, ws.gradient);
    double mr = 0, sr = 0, mg = 0, sg = 0;
    auto in_bg = [](std::uint8_t v) { return v != 0; };
    sample(ws.residual, ws.background, nb, in_bg, ws.sample);
    robust_stats(ws.sample, mr, sr);
    sample(ws.gradient, ws.background, nb, in_bg, ws.sample);
    robust_stats(ws.sample, mg, sg);
    const double tr = std::max(opt_.phase_sigmas * sr, opt_.phase_floor);
    const double tg = mg + std::max(opt_.gradient_sigmas * sg, opt_.gradient_floor);
    for (std::size_t p = 0; p < n; ++p) {
      const std::uint8_t c = ws.candidates.data()[p];
      const bool obj = c == 2 || (c == 1 && (!(std::abs(static_cast<double>(ws.residual.data()[p]) - mr) <= tr) ||
                                              !(static_cast<double>(ws.gradient.data()[p]) <= tg)));
      ws.objects.data()[p] = obj;
    }
    // Dilate through `residual`-free scratch: `objects` -> tmp (`dilated` reused below).
    dilate(ws.objects, ws.dilated, ws.objects, opt_.dilation, ws.counts);
    std::size_t nnew = 0;
    for (std::size_t p = 0; p < n; ++p) nnew += ws.candidates.data()[p] != 0 && ws.objects.data()[p] == 0;
    info.iterations = it + 1;
    if (nnew < min_nb) {
      info.fell_back = true;
      log::warn("background detection: objects cover too much of the frame; keeping the previous background region",
                "wavefront.background.fallback");
      break;
    }
    for (std::size_t p = 0; p < n; ++p)
      ws.background.data()[p] = ws.candidates.data()[p] != 0 && ws.objects.data()[p] == 0;
    nb = nnew;
  }
  if (!automatic) {
    for (std::size_t p = 0; p < n; ++p) ws.background.data()[p] = ws.candidates.data()[p] != 0;
    nb = nc;
  }
  if (!fit_on(B, phase, ws.background, nb, ws))
    fail_input("the background fit is degenerate on the " + std::to_string(nb) + " background pixels");

  // Output and residual RMS over the background.
  double ss = 0;
  {
    const float* q = B.q();
    for (std::size_t y = 0; y < h_; ++y) {
      const float* src = phase.row(y);
      const std::uint8_t* m = ws.background.row(y);
      float* dst = out.row(y);
      for (std::size_t x = 0; x < w_; ++x, q += J) {
        double v = 0;
        for (std::size_t k = 0; k < J; ++k) v += a[k] * q[k];
        const double r = static_cast<double>(src[x]) - v;
        if (m[x]) ss += r * r;
        dst[x] = static_cast<float>(r);
      }
    }
  }
  B.to_raw(a, coefficients.data());
  info.background_pixels = nb;
  info.residual_rms = std::sqrt(ss / static_cast<double>(nb));
  return info;
}

void BackgroundCompensator::evaluate(std::span<const double> c, ImageView<float> out, Workspace& ws) const {
  if (c.size() != static_cast<std::size_t>(J_)) fail_config("wrong number of background coefficients");
  if (out.height() != h_ || out.width() != w_) fail_config("background surface image has the wrong size");
  if (ws.rhs.size() != static_cast<std::size_t>(J_)) fail_config("background workspace was made for another compensator");
  impl_->basis.from_raw(c.data(), ws.rhs.data());
  impl_->basis.synthesize(ws.rhs.data(), out);
}

} // namespace wavestack::wavefront
