#include "sampled_basis.hpp"

#include "wavestack/core/error.hpp"

#include <algorithm>
#include <cmath>
#include <string>

namespace wavestack::wavefront::detail {

Support disk_support(std::size_t h, std::size_t w, double cx, double cy, double r) {
  Support s;
  s.height = h;
  s.width = w;
  const double r2 = r * r;
  for (std::size_t y = 0; y < h; ++y) {
    const double dy = static_cast<double>(y) - cy;
    const double rem = r2 - dy * dy;
    if (rem < 0) continue;
    // Columns with (x − cx)² <= rem; scan to be exact at the boundary.
    const double half = std::sqrt(rem);
    long lo = static_cast<long>(std::floor(cx - half)) - 1, hi = static_cast<long>(std::ceil(cx + half)) + 1;
    lo = std::max(lo, 0L);
    hi = std::min(hi, static_cast<long>(w) - 1);
    long x0 = -1, x1 = -1;
    for (long x = lo; x <= hi; ++x) {
      const double dx = static_cast<double>(x) - cx;
      if (dx * dx + dy * dy <= r2) {
        if (x0 < 0) x0 = x;
        x1 = x + 1;
      }
    }
    if (x0 >= 0) {
      s.runs.push_back({static_cast<std::uint32_t>(y), static_cast<std::uint32_t>(x0), static_cast<std::uint32_t>(x1)});
      s.count += static_cast<std::size_t>(x1 - x0);
    }
  }
  return s;
}

Support frame_support(std::size_t h, std::size_t w) {
  Support s;
  s.height = h;
  s.width = w;
  for (std::size_t y = 0; y < h; ++y)
    s.runs.push_back({static_cast<std::uint32_t>(y), 0u, static_cast<std::uint32_t>(w)});
  s.count = h * w;
  return s;
}

bool cholesky(const double* g, double* L, int n, double rel_tol) {
  double dmax = 0;
  for (int i = 0; i < n; ++i) dmax = std::max(dmax, g[i * n + i]);
  if (!(dmax > 0)) return false;
  for (int i = 0; i < n * n; ++i) L[i] = 0;
  for (int j = 0; j < n; ++j) {
    double d = g[j * n + j];
    for (int k = 0; k < j; ++k) d -= L[j * n + k] * L[j * n + k];
    if (!(d > rel_tol * dmax)) return false;
    const double ljj = std::sqrt(d);
    L[j * n + j] = ljj;
    for (int i = j + 1; i < n; ++i) {
      double v = g[i * n + j];
      for (int k = 0; k < j; ++k) v -= L[i * n + k] * L[j * n + k];
      L[i * n + j] = v / ljj;
    }
  }
  return true;
}

void cholesky_solve(const double* L, double* x, int n) {
  for (int i = 0; i < n; ++i) {
    double v = x[i];
    for (int k = 0; k < i; ++k) v -= L[i * n + k] * x[k];
    x[i] = v / L[i * n + i];
  }
  for (int i = n - 1; i >= 0; --i) {
    double v = x[i];
    for (int k = i + 1; k < n; ++k) v -= L[k * n + i] * x[k];
    x[i] = v / L[i * n + i];
  }
}

SampledBasis::SampledBasis(Support support, int terms, const Eval& eval) : s_(std::move(support)), J_(terms) {
  if (J_ < 1) fail_config("a fit needs at least one basis term");
  const std::size_t n = s_.count, J = static_cast<std::size_t>(J_);
  if (n < J)
    fail_config("the fit region has " + std::to_string(n) + " pixels, fewer than the " + std::to_string(J) +
                " basis terms");
  // Raw basis, column-major (column k contiguous) for Gram–Schmidt.
  std::vector<double> a(n * J), row(J);
  std::size_t p = 0;
  for (const Run& run : s_.runs)
    for (std::uint32_t x = run.x0; x < run.x1; ++x, ++p) {
      eval(static_cast<double>(x), static_cast<double>(run.y), row.data());
      for (std::size_t k = 0; k < J; ++k) a[k * n + p] = row[k];
    }
  // Modified Gram–Schmidt, two passes per column; R accumulates both.
  r_.assign(J * J, 0.0);
  for (std::size_t k = 0; k < J; ++k) {
    double* ak = a.data() + k * n;
    double norm0 = 0;
    for (std::size_t i = 0; i < n; ++i) norm0 += ak[i] * ak[i];
    norm0 = std::sqrt(norm0);
    for (int pass = 0; pass < 2; ++pass)
      for (std::size_t i = 0; i < k; ++i) {
        const double* qi = a.data() + i * n;
        double d = 0;
        for (std::size_t t = 0; t < n; ++t) d += qi[t] * ak[t];
        for (std::size_t t = 0; t < n; ++t) ak[t] -= d * qi[t];
        r_[i * J + k] += d;
      }
    double norm = 0;
    for (std::size_t i = 0; i < n; ++i) norm += ak[i] * ak[i];
    norm = std::sqrt(norm);
    if (!(norm > 1e-10 * norm0) || !(norm0 > 0))
      fail_config("basis term " + std::to_string(k) + " is linearly dependent on the others over the " +
                  std::to_string(n) + "-pixel fit region (region too small for " + std::to_string(J) + " terms?)");
    r_[k * J + k] = norm;
    for (std::size_t i = 0; i < n; ++i) ak[i] /= norm;
  }
  q_.resize(n * J);
  for (std::size_t i = 0; i < n; ++i)
    for (std::size_t k = 0; k < J; ++k) q_[i * J + k] = static_cast<float>(a[k * n + i]);
  // Exact Gram matrix of the stored floats.
  g_.assign(J * J, 0.0);
  for (std::size_t i = 0; i < n; ++i) {
    const float* qi = q_.data() + i * J;
    for (std::size_t r = 0; r < J; ++r) {
      const double v = qi[r];
      for (std::size_t c = 0; c <= r; ++c) g_[r * J + c] += v * qi[c];
    }
  }
  for (std::size_t r = 0; r < J; ++r)
    for (std::size_t c = 0; c < r; ++c) g_[c * J + r] = g_[r * J + c];
  l_.assign(J * J, 0.0);
  if (!cholesky(g_.data(), l_.data(), J_))
    fail_internal("the stored orthonormal basis is not positive definite (float round-off)");
}

void SampledBasis::project(ImageView<const float> img, double* qt) const {
  const std::size_t J = static_cast<std::size_t>(J_);
  for (std::size_t k = 0; k < J; ++k) qt[k] = 0;
  const float* q = q_.data();
  for (const Run& run : s_.runs) {
    const float* src = img.row(run.y);
    for (std::uint32_t x = run.x0; x < run.x1; ++x, q += J) {
      const double v = src[x];
      for (std::size_t k = 0; k < J; ++k) qt[k] += v * q[k];
    }
  }
}

void SampledBasis::to_raw(const double* a, double* c) const {
  const int J = J_;
  for (int i = J - 1; i >= 0; --i) {
    double v = a[i];
    for (int k = i + 1; k < J; ++k) v -= r_[static_cast<std::size_t>(i * J + k)] * c[k];
    c[i] = v / r_[static_cast<std::size_t>(i * J + i)];
  }
}

void SampledBasis::from_raw(const double* c, double* a) const {
  const int J = J_;
  for (int i = 0; i < J; ++i) {
    double v = 0;
    for (int k = i; k < J; ++k) v += r_[static_cast<std::size_t>(i * J + k)] * c[k];
    a[i] = v;
  }
}

void SampledBasis::synthesize(const double* a, ImageView<float> out) const {
  const std::size_t J = static_cast<std::size_t>(J_);
  const float* q = q_.data();
  for (const Run& run : s_.runs) {
    float* dst = out.row(run.y);
    for (std::uint32_t x = run.x0; x < run.x1; ++x, q += J) {
      double v = 0;
      for (std::size_t k = 0; k < J; ++k) v += a[k] * q[k];
      dst[x] = static_cast<float>(v);
    }
  }
}

void SampledBasis::subtract(ImageView<const float> in, const double* a, ImageView<float> out) const {
  const std::size_t J = static_cast<std::size_t>(J_);
  const float* q = q_.data();
  for (const Run& run : s_.runs) {
    const float* src = in.row(run.y);
    float* dst = out.row(run.y);
    for (std::uint32_t x = run.x0; x < run.x1; ++x, q += J) {
      double v = 0;
      for (std::size_t k = 0; k < J; ++k) v += a[k] * q[k];
      dst[x] = static_cast<float>(src[x] - v);
    }
  }
}

} // namespace wavestack::wavefront::detail
