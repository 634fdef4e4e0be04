#pragma once
// Internal: a set of J basis functions sampled on the pixels of a support
// (a disk or the whole frame), orthonormalised once by modified Gram–Schmidt
// with one re-orthogonalisation pass ("twice is enough") in double:
//   A = Q R,  A[p][k] = f_k(pixel p),  Q orthonormal columns, R upper J×J.
// Q is kept in float, pixel-major (the J values of one pixel contiguous), so
// a per-frame projection streams through memory once with J double
// accumulators. Because the stored float Q is not exactly orthonormal, the
// exact Gram matrix G = Qᵀ Q of the stored values is factorised (Cholesky,
// double) and every fit solves G a = Qᵀ φ: the fit is then the exact
// least-squares fit in the span of the stored basis.
#include "wavestack/core/image.hpp"

#include <cstddef>
#include <cstdint>
#include <functional>
#include <vector>

namespace wavestack::wavefront::detail {

/// Pixels [x0, x1) of row y.
struct Run {
  std::uint32_t y, x0, x1;
};

struct Support {
  std::size_t height = 0, width = 0;
  std::vector<Run> runs;
  std::size_t count = 0; ///< number of pixels
};

/// Pixels whose centre (col, row) satisfies (col−cx)² + (row−cy)² <= r².
Support disk_support(std::size_t h, std::size_t w, double cx, double cy, double r);
/// Every pixel of an h×w frame.
Support frame_support(std::size_t h, std::size_t w);

/// Cholesky factor L (lower, row-major n×n) of a symmetric positive definite
/// matrix g; returns false when a pivot falls below rel_tol·max diagonal.
bool cholesky(const double* g, double* L, int n, double rel_tol = 1e-12);
/// Solve L Lᵀ x = b in place (x enters as b).
void cholesky_solve(const double* L, double* x, int n);

class SampledBasis {
public:
  /// eval(col, row, out) writes the J raw basis values of one pixel.
  using Eval = std::function<void(double col, double row, double* out)>;
  /// Throws Error(config) when the sampled functions are linearly dependent
  /// on the support (too few pixels for J terms).
  SampledBasis(Support support, int terms, const Eval& eval);

  int terms() const noexcept { return J_; }
  const Support& support() const noexcept { return s_; }
  std::size_t count() const noexcept { return s_.count; }
  const float* q() const noexcept { return q_.data(); }
  /// R of A = Q R (row-major J×J, upper).
  const std::vector<double>& r() const noexcept { return r_; }
  /// Exact Gram matrix of the stored float Q (row-major J×J) and its Cholesky factor.
  const std::vector<double>& gram() const noexcept { return g_; }
  const std::vector<double>& gram_factor() const noexcept { return l_; }

  /// qt[k] = Σ_p Q[p][k] img(p) over the support, accumulated in double.
  void project(ImageView<const float> img, double* qt) const;
  /// a = G⁻¹ qt (in place).
  void solve(double* qt) const { cholesky_solve(l_.data(), qt, J_); }
  /// Coefficients of the raw basis from orthonormal ones: c = R⁻¹ a.
  void to_raw(const double* a, double* c) const;
  /// a = R c.
  void from_raw(const double* c, double* a) const;
  /// out(p) = Σ_k Q[p][k] a[k] on the support (other pixels untouched).
  void synthesize(const double* a, ImageView<float> out) const;
  /// out(p) = in(p) − Σ_k Q[p][k] a[k] on the support (others untouched).
  void subtract(ImageView<const float> in, const double* a, ImageView<float> out) const;

private:
  Support s_;
  int J_;
  std::vector<float> q_;
  std::vector<double> r_, g_, l_;
};

} // namespace wavestack::wavefront::detail
