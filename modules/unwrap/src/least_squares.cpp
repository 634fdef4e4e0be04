#include "wavestack/unwrap/least_squares.hpp"

#include "wavestack/core/error.hpp"
#include "wavestack/core/log.hpp"
#include "wavestack/fft/fft.hpp"
#include "wavestack/unwrap/wrap.hpp"

#include <fftw3.h>

#include <algorithm>
#include <cmath>
#include <cstring>
#include <limits>
#include <map>
#include <mutex>
#include <string>
#include <tuple>

namespace wavestack::unwrap {

namespace {

// ---- real-to-real plan cache ------------------------------------------------
// The fft module has no r2r plans and does not expose its mutex, so this
// module keeps its own cache under its own mutex. FFTW's planner itself is
// made thread-safe (a global lock inside FFTW) by the fft module's call to
// fftwf_make_planner_thread_safe(), which runs when its plan cache is first
// used: fft::planning() below guarantees that has happened before we plan.

unsigned planner_flags(fft::Planning p) {
  switch (p) {
  case fft::Planning::measure: return FFTW_MEASURE;
  case fft::Planning::patient: return FFTW_PATIENT;
  case fft::Planning::estimate: break;
  }
  return FFTW_ESTIMATE;
}

struct R2RCache {
  std::mutex mutex;
  std::map<std::tuple<std::size_t, std::size_t, bool, unsigned>, fftwf_plan> plans;
};

R2RCache& r2r_cache() {
  static R2RCache* c = new R2RCache; // never destroyed: plans live until exit
  return *c;
}

fftwf_plan r2r_plan(std::size_t h, std::size_t w, bool forward) {
  const unsigned flags = planner_flags(fft::planning()); // also switches on FFTW's planner lock
  R2RCache& c = r2r_cache();
  std::lock_guard lock(c.mutex);
  const auto key = std::make_tuple(h, w, forward, flags);
  if (auto it = c.plans.find(key); it != c.plans.end()) return it->second;
  if (h > static_cast<std::size_t>(std::numeric_limits<int>::max()) ||
      w > static_cast<std::size_t>(std::numeric_limits<int>::max()))
    fail_config("least-squares unwrapping: frame too large for FFTW");
  float* scratch = static_cast<float*>(fftwf_malloc(h * w * sizeof(float)));
  if (!scratch) throw std::bad_alloc();
  const fftw_r2r_kind kind = forward ? FFTW_REDFT10 : FFTW_REDFT01;
  fftwf_plan p = fftwf_plan_r2r_2d(static_cast<int>(h), static_cast<int>(w), scratch, scratch, kind, kind, flags);
  fftwf_free(scratch);
  if (!p)
    fail_internal("FFTW could not plan a " + std::to_string(h) + "x" + std::to_string(w) + " cosine transform");
  log::debug("unwrap: planned " + std::to_string(h) + "x" + std::to_string(w) +
             (forward ? " DCT-II" : " DCT-III") + " (in place)");
  c.plans.emplace(key, p);
  return p;
}

double dot(const float* a, const float* b, std::size_t n) {
  double s = 0;
  for (std::size_t i = 0; i < n; ++i) s += double(a[i]) * double(b[i]);
  return s;
}

/// Wrapped difference of two arbitrary values; 0 when either is not finite.
inline float wrapped_diff(float a, float b) noexcept {
  const float d = a - b;
  if (!std::isfinite(d)) return 0.f;
  return (d >= -pi_f && d < pi_f) ? d : wrap(d);
}

/// ρ = divergence of (gx, gy): gx[y,x] − gx[y,x−1] + gy[y,x] − gy[y−1,x],
/// with gx[·,w−1] and gy[h−1,·] already zero and g = 0 outside.
void divergence(const Image<float>& gx, const Image<float>& gy, Image<float>& rho) {
  const std::size_t h = gx.height(), w = gx.width();
  for (std::size_t y = 0; y < h; ++y) {
    const float* ax = gx.row(y);
    const float* ay = gy.row(y);
    const float* ayu = y > 0 ? gy.row(y - 1) : nullptr;
    float* r = rho.row(y);
    r[0] = ax[0];
    for (std::size_t x = 1; x < w; ++x) r[x] = ax[x] - ax[x - 1];
    if (ayu)
      for (std::size_t x = 0; x < w; ++x) r[x] += ay[x] - ayu[x];
    else
      for (std::size_t x = 0; x < w; ++x) r[x] += ay[x];
  }
}

/// qp = Q p, the weighted Neumann Laplacian with edge weights ux, uy
/// (ux[·,w−1] = uy[h−1,·] = 0).
void weighted_laplacian(const Image<float>& ux, const Image<float>& uy, const Image<float>& p, Image<float>& qp) {
  const std::size_t h = p.height(), w = p.width();
  for (std::size_t y = 0; y < h; ++y) {
    const float* pr = p.row(y);
    const float* wx = ux.row(y);
    float* q = qp.row(y);
    if (w == 1) {
      q[0] = 0;
    } else {
      q[0] = wx[0] * (pr[1] - pr[0]);
      for (std::size_t x = 1; x + 1 < w; ++x) q[x] = wx[x] * (pr[x + 1] - pr[x]) - wx[x - 1] * (pr[x] - pr[x - 1]);
      q[w - 1] = -wx[w - 2] * (pr[w - 1] - pr[w - 2]);
    }
    if (y + 1 < h) {
      const float* pd = p.row(y + 1);
      const float* wy = uy.row(y);
      for (std::size_t x = 0; x < w; ++x) q[x] += wy[x] * (pd[x] - pr[x]);
    }
    if (y > 0) {
      const float* pu = p.row(y - 1);
      const float* wyu = uy.row(y - 1);
      for (std::size_t x = 0; x < w; ++x) q[x] -= wyu[x] * (pr[x] - pu[x]);
    }
  }
}

inline float clamp_weight(float v) noexcept {
  if (!(v > 0.f)) return 0.f; // also NaN
  return v < 1.f ? v : 1.f;
}

} // namespace

LeastSquaresUnwrapper::LeastSquaresUnwrapper(std::size_t h, std::size_t w, LeastSquaresOptions options)
    : h_(h), w_(w), opt_(options) {
  if (h == 0 || w == 0) fail_config("least-squares unwrapping needs a non-empty frame");
  if (!(opt_.tolerance > 0 && opt_.tolerance < 1))
    fail_config("least-squares unwrapping: tolerance must be in (0, 1), got " + std::to_string(opt_.tolerance));
  if (opt_.max_iterations < 1)
    fail_config("least-squares unwrapping: max_iterations must be at least 1, got " +
                std::to_string(opt_.max_iterations));
  inv_eig_.resize(h, w);
  const double scale = 4.0 * double(h) * double(w); // REDFT01(REDFT10(x)) = 4hw·x in 2-D
  for (std::size_t i = 0; i < h; ++i) {
    const double ey = 2.0 * std::cos(pi * double(i) / double(h)) - 2.0;
    for (std::size_t j = 0; j < w; ++j) {
      const double e = ey + 2.0 * std::cos(pi * double(j) / double(w)) - 2.0;
      inv_eig_(i, j) = (i == 0 && j == 0) ? 0.f : static_cast<float>(1.0 / (e * scale));
    }
  }
  forward_ = r2r_plan(h, w, true);
  inverse_ = r2r_plan(h, w, false);
}

LeastSquaresUnwrapper::Workspace LeastSquaresUnwrapper::make_workspace() const {
  Workspace ws;
  for (Image<float>* im : {&ws.gx, &ws.gy, &ws.ux, &ws.uy, &ws.rhs, &ws.z, &ws.p}) im->resize(h_, w_);
  return ws;
}

void LeastSquaresUnwrapper::check(std::size_t h, std::size_t w, const char* what) const {
  if (h != h_ || w != w_)
    fail_internal(std::string("least-squares unwrapping: ") + what + " is " + std::to_string(h) + "x" +
                  std::to_string(w) + ", planned " + std::to_string(h_) + "x" + std::to_string(w_));
}

void LeastSquaresUnwrapper::check_workspace(const Workspace& ws) const {
  for (const Image<float>* im : {&ws.gx, &ws.gy, &ws.ux, &ws.uy, &ws.rhs, &ws.z, &ws.p})
    check(im->height(), im->width(), "a workspace buffer");
}

void LeastSquaresUnwrapper::dct_solve(float* buf) const {
  if (!fft::is_aligned(buf)) fail_internal("least-squares unwrapping: DCT buffer is not aligned");
  fftwf_execute_r2r(forward_, buf, buf);
  const float* e = inv_eig_.data();
  const std::size_t n = h_ * w_;
  for (std::size_t i = 0; i < n; ++i) buf[i] *= e[i];
  fftwf_execute_r2r(inverse_, buf, buf);
}

void LeastSquaresUnwrapper::solve_poisson(ImageView<const float> rhs, ImageView<float> out, Workspace& ws) const {
  check(rhs.height(), rhs.width(), "the right-hand side");
  check(out.height(), out.width(), "the output");
  check_workspace(ws);
  for (std::size_t y = 0; y < h_; ++y) std::memcpy(ws.z.row(y), rhs.row(y), w_ * sizeof(float));
  dct_solve(ws.z.data());
  for (std::size_t y = 0; y < h_; ++y) std::memcpy(out.row(y), ws.z.row(y), w_ * sizeof(float));
}

const Image<float>& LeastSquaresUnwrapper::direct(Workspace& ws) const {
  divergence(ws.gx, ws.gy, ws.z);
  dct_solve(ws.z.data());
  return ws.z;
}

void LeastSquaresUnwrapper::edge_weights(ImageView<const float> weights, ImageView<const float> wrapped,
                                         Workspace& ws) const {
  // Per-pixel squared weight W² (0 where the weight or the phase is not
  // finite) into ws.p, then U = min over the two pixels of each edge.
  for (std::size_t y = 0; y < h_; ++y) {
    const float* a = weights.row(y);
    const float* ph = wrapped.data() ? wrapped.row(y) : nullptr;
    float* q = ws.p.row(y);
    for (std::size_t x = 0; x < w_; ++x) {
      const float v = clamp_weight(a[x]);
      q[x] = (ph && !std::isfinite(ph[x])) ? 0.f : v * v;
    }
  }
  for (std::size_t y = 0; y < h_; ++y) {
    const float* q = ws.p.row(y);
    float* ux = ws.ux.row(y);
    for (std::size_t x = 0; x + 1 < w_; ++x) ux[x] = std::min(q[x], q[x + 1]);
    ux[w_ - 1] = 0.f;
    float* uy = ws.uy.row(y);
    if (y + 1 < h_) {
      const float* qd = ws.p.row(y + 1);
      for (std::size_t x = 0; x < w_; ++x) uy[x] = std::min(q[x], qd[x]);
    } else {
      std::fill(uy, uy + w_, 0.f);
    }
  }
}

const Image<float>& LeastSquaresUnwrapper::pcg(Workspace& ws, LeastSquaresStats& st) const {
  const std::size_t n = h_ * w_;
  // ρ_U = divergence of the weighted differences (g ← U·g in place).
  for (std::size_t i = 0; i < n; ++i) {
    ws.gx.data()[i] *= ws.ux.data()[i];
    ws.gy.data()[i] *= ws.uy.data()[i];
  }
  divergence(ws.gx, ws.gy, ws.rhs);
  Image<float>& phi = ws.gx; // differences are no longer needed
  Image<float>& qp = ws.gy;
  float* r = ws.rhs.data();
  float* z = ws.z.data();
  float* p = ws.p.data();
  float* f = phi.data();
  float* q = qp.data();
  std::fill(f, f + n, 0.f);
  const double norm_b = std::sqrt(dot(r, r, n));
  st.iterations = 0;
  st.relative_residual = 0;
  st.converged = true;
  if (!(norm_b > 0)) return phi; // no data: φ = 0 is the solution
  double rz_old = 0;
  double res = 1;
  for (int k = 0; k < opt_.max_iterations; ++k) {
    std::memcpy(z, r, n * sizeof(float));
    dct_solve(z); // z = L⁻¹ r (L, Q and L⁻¹ are negative semi-definite: signs cancel)
    const double rz = dot(r, z, n);
    if (k == 0 || rz_old == 0) {
      std::memcpy(p, z, n * sizeof(float));
    } else {
      const float beta = static_cast<float>(rz / rz_old);
      for (std::size_t i = 0; i < n; ++i) p[i] = z[i] + beta * p[i];
    }
    weighted_laplacian(ws.ux, ws.uy, ws.p, qp);
    const double pq = dot(p, q, n);
    st.iterations = k + 1;
    if (pq == 0 || rz == 0) break;
    const float alpha = static_cast<float>(rz / pq);
    for (std::size_t i = 0; i < n; ++i) {
      f[i] += alpha * p[i];
      r[i] -= alpha * q[i];
    }
    rz_old = rz;
    res = std::sqrt(dot(r, r, n)) / norm_b;
    if (res <= opt_.tolerance) break;
  }
  st.relative_residual = res;
  st.converged = res <= opt_.tolerance;
  return phi;
}

namespace {
void write_out(const Image<float>& phi, ImageView<const float> wrapped, bool congruent, ImageView<float> out) {
  if (congruent && wrapped.data()) {
    make_congruent(wrapped, phi.view(), out);
    return;
  }
  for (std::size_t y = 0; y < phi.height(); ++y) std::memcpy(out.row(y), phi.row(y), phi.width() * sizeof(float));
}

void fill_wrapped_differences(ImageView<const float> wr, Image<float>& gx, Image<float>& gy) {
  const std::size_t h = wr.height(), w = wr.width();
  for (std::size_t y = 0; y < h; ++y) {
    const float* a = wr.row(y);
    float* dx = gx.row(y);
    for (std::size_t x = 0; x + 1 < w; ++x) dx[x] = wrapped_diff(a[x + 1], a[x]);
    dx[w - 1] = 0.f;
    float* dy = gy.row(y);
    if (y + 1 < h) {
      const float* b = wr.row(y + 1);
      for (std::size_t x = 0; x < w; ++x) dy[x] = wrapped_diff(b[x], a[x]);
    } else {
      std::fill(dy, dy + w, 0.f);
    }
  }
}

void fill_differences(ImageView<const float> gy_in, ImageView<const float> gx_in, Image<float>& gx, Image<float>& gy) {
  const std::size_t h = gx.height(), w = gx.width();
  for (std::size_t y = 0; y < h; ++y) {
    const float* sx = gx_in.row(y);
    const float* sy = gy_in.row(y);
    float* dx = gx.row(y);
    float* dy = gy.row(y);
    for (std::size_t x = 0; x < w; ++x) {
      dx[x] = std::isfinite(sx[x]) ? sx[x] : 0.f;
      dy[x] = (y + 1 < h && std::isfinite(sy[x])) ? sy[x] : 0.f;
    }
    dx[w - 1] = 0.f;
  }
}
} // namespace

LeastSquaresStats LeastSquaresUnwrapper::apply(ImageView<const float> wrapped, ImageView<float> out,
                                               Workspace& ws) const {
  check(wrapped.height(), wrapped.width(), "the wrapped phase");
  check(out.height(), out.width(), "the output");
  check_workspace(ws);
  fill_wrapped_differences(wrapped, ws.gx, ws.gy);
  write_out(direct(ws), wrapped, opt_.congruent, out);
  return {};
}

LeastSquaresStats LeastSquaresUnwrapper::apply(ImageView<const float> wrapped, ImageView<const float> weights,
                                               ImageView<float> out, Workspace& ws) const {
  check(wrapped.height(), wrapped.width(), "the wrapped phase");
  check(weights.height(), weights.width(), "the weight image");
  check(out.height(), out.width(), "the output");
  check_workspace(ws);
  fill_wrapped_differences(wrapped, ws.gx, ws.gy);
  edge_weights(weights, wrapped, ws);
  LeastSquaresStats st;
  const Image<float>& phi = pcg(ws, st);
  write_out(phi, wrapped, opt_.congruent, out);
  return st;
}

LeastSquaresStats LeastSquaresUnwrapper::integrate(ImageView<const float> gy, ImageView<const float> gx,
                                                   ImageView<float> out, Workspace& ws) const {
  check(gy.height(), gy.width(), "the y differences");
  check(gx.height(), gx.width(), "the x differences");
  check(out.height(), out.width(), "the output");
  check_workspace(ws);
  fill_differences(gy, gx, ws.gx, ws.gy);
  write_out(direct(ws), {}, false, out);
  return {};
}

LeastSquaresStats LeastSquaresUnwrapper::integrate(ImageView<const float> gy, ImageView<const float> gx,
                                                   ImageView<const float> weights, ImageView<float> out,
                                                   Workspace& ws) const {
  check(gy.height(), gy.width(), "the y differences");
  check(gx.height(), gx.width(), "the x differences");
  check(weights.height(), weights.width(), "the weight image");
  check(out.height(), out.width(), "the output");
  check_workspace(ws);
  fill_differences(gy, gx, ws.gx, ws.gy);
  edge_weights(weights, {}, ws);
  LeastSquaresStats st;
  const Image<float>& phi = pcg(ws, st);
  write_out(phi, {}, false, out);
  return st;
}

} // namespace wavestack::unwrap
