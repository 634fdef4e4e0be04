#include "wavestack/propagate/transfer_function.hpp"

#include "detail.hpp"

#include <algorithm>
#include <cmath>
#include <cstring>
#include <limits>
#include <list>
#include <map>
#include <mutex>
#include <tuple>
#include <vector>

namespace wavestack::propagate {

namespace {
std::vector<std::uint32_t> find_support(const Image<cfloat>& q);
}

TransferFunction::TransferFunction(TransferKind kind, std::size_t ph, std::size_t pw, const Grid& grid,
                                   double distance, bool band_limit)
    : kind_(kind), ph_(ph), pw_(pw), z_(distance) {
  detail::check_setup("transfer function", ph, pw, grid, distance);
  const double lambda = grid.medium_wavelength();
  const double dfx = 1.0 / (static_cast<double>(pw) * grid.dx);
  const double dfy = 1.0 / (static_cast<double>(ph) * grid.dy);
  if (!band_limit) {
    ulim_x_ = ulim_y_ = std::numeric_limits<double>::infinity();
  } else if (kind == TransferKind::angular_spectrum) {
    ulim_x_ = detail::asm_band_limit(lambda, dfx, distance);
    ulim_y_ = detail::asm_band_limit(lambda, dfy, distance);
  } else {
    ulim_x_ = detail::fresnel_band_limit(lambda, dfx, distance);
    ulim_y_ = detail::fresnel_band_limit(lambda, dfy, distance);
  }

  const std::size_t hx = pw / 2, hy = ph / 2;
  quarter_.resize(hy + 1, hx + 1);
  std::vector<double> fx2(hx + 1);
  std::vector<char> keep_x(hx + 1);
  for (std::size_t kx = 0; kx <= hx; ++kx) {
    const double fx = fft::bin_frequency(kx, pw, grid.dx);
    fx2[kx] = fx * fx;
    keep_x[kx] = std::abs(fx) <= ulim_x_;
  }
  const double norm = 1.0 / (static_cast<double>(ph) * static_cast<double>(pw));
  if (kind == TransferKind::angular_spectrum) {
    // Same expressions, in the same order, as AngularSpectrum's constructor,
    // so the two give bit-identical tables.
    const double kmax2 = 1.0 / (lambda * lambda);
    const double two_pi_z = 2.0 * M_PI * distance;
    for (std::size_t ky = 0; ky <= hy; ++ky) {
      const double fy = fft::bin_frequency(ky, ph, grid.dy);
      const bool keep_y = std::abs(fy) <= ulim_y_;
      cfloat* row = quarter_.row(ky);
      for (std::size_t kx = 0; kx <= hx; ++kx) {
        const double a = kmax2 - fx2[kx] - fy * fy;
        if (!keep_y || !keep_x[kx] || a < 0.0) {
          row[kx] = cfloat(0.0f, 0.0f);
          continue;
        }
        const double phase = two_pi_z * std::sqrt(a);
        row[kx] = cfloat(static_cast<float>(norm * std::cos(phase)), static_cast<float>(norm * std::sin(phase)));
      }
    }
  } else {
    // e^{ikz} with kz (up to ~1e7 rad) reduced in double first.
    const double kz = detail::wrap(2.0 * M_PI / lambda * distance);
    const double pi_lz = M_PI * lambda * distance;
    for (std::size_t ky = 0; ky <= hy; ++ky) {
      const double fy = fft::bin_frequency(ky, ph, grid.dy);
      const bool keep_y = std::abs(fy) <= ulim_y_;
      cfloat* row = quarter_.row(ky);
      for (std::size_t kx = 0; kx <= hx; ++kx) {
        if (!keep_y || !keep_x[kx]) {
          row[kx] = cfloat(0.0f, 0.0f);
          continue;
        }
        const double phase = kz - pi_lz * (fx2[kx] + fy * fy);
        row[kx] = cfloat(static_cast<float>(norm * std::cos(phase)), static_cast<float>(norm * std::sin(phase)));
      }
    }
  }
  support_ = find_support(quarter_);
}

namespace {
std::vector<std::uint32_t> find_support(const Image<cfloat>& q) {
  std::vector<std::uint32_t> e(q.height(), 0);
  for (std::size_t y = 0; y < q.height(); ++y)
    for (std::size_t x = q.width(); x > 0; --x)
      if (q(y, x - 1) != cfloat(0.0f, 0.0f)) {
        e[y] = static_cast<std::uint32_t>(x);
        break;
      }
  return e;
}
} // namespace

Image<cfloat> TransferFunction::full() const {
  Image<cfloat> t(ph_, pw_);
  for (std::size_t ky = 0; ky < ph_; ++ky)
    for (std::size_t kx = 0; kx < pw_; ++kx) t(ky, kx) = at(ky, kx);
  return t;
}

// Row ky uses quarter row min(ky, ph-ky); columns 0..pw/2 read the quarter
// row forwards, columns pw/2+1..pw-1 read quarter columns pw/2-1..1 (even
// pw) or (pw-1)/2..1 (odd pw) backwards. Rows ky and ph-ky are done together
// so each quarter row is read from memory once (the tables of a stack do
// not stay in cache).
void TransferFunction::multiply(cfloat* spectrum) const noexcept {
  const std::size_t n1 = pw_ / 2 + 1, n2 = pw_ - n1;
  auto row = [&](std::size_t ky, const float* q) {
    float* s = reinterpret_cast<float*>(spectrum + ky * pw_);
    detail::multiply(s, q, n1);
    detail::multiply_reversed(s + 2 * n1, q + 2, n2);
  };
  for (std::size_t qy = 0; qy <= ph_ / 2; ++qy) {
    const float* q = reinterpret_cast<const float*>(quarter_.row(qy));
    row(qy, q);
    if (qy != 0 && ph_ - qy != qy) row(ph_ - qy, q);
  }
}

void TransferFunction::multiply(const cfloat* in, cfloat* out) const noexcept {
  const std::size_t n1 = pw_ / 2 + 1, n2 = pw_ - n1;
  auto row = [&](std::size_t ky, const float* q) {
    const float* s = reinterpret_cast<const float*>(in + ky * pw_);
    float* o = reinterpret_cast<float*>(out + ky * pw_);
    detail::multiply(s, q, o, n1);
    detail::multiply_reversed(s + 2 * n1, q + 2, o + 2 * n1, n2);
  };
  for (std::size_t qy = 0; qy <= ph_ / 2; ++qy) {
    const float* q = reinterpret_cast<const float*>(quarter_.row(qy));
    row(qy, q);
    if (qy != 0 && ph_ - qy != qy) row(ph_ - qy, q);
  }
}

void TransferFunction::multiply_support(const cfloat* in, cfloat* out, std::uint32_t* written) const noexcept {
  const std::size_t n1 = pw_ / 2 + 1, n2 = pw_ - n1;
  // Row ky with support e (quarter columns 0..e-1): full columns [0, min(e, n1))
  // forwards and pw-j for j in [1, min(e-1, n2)] backwards.
  auto row = [&](std::size_t ky, const float* q, std::size_t e) {
    const float* s = reinterpret_cast<const float*>(in + ky * pw_);
    float* o = reinterpret_cast<float*>(out + ky * pw_);
    const std::size_t prev = written[ky];
    const std::size_t f_new = std::min(e, n1), f_old = std::min(prev, n1);
    const std::size_t r_new = e > 1 ? std::min(e - 1, n2) : 0, r_old = prev > 1 ? std::min(prev - 1, n2) : 0;
    if (f_old > f_new) std::memset(static_cast<void*>(o + 2 * f_new), 0, (f_old - f_new) * sizeof(cfloat));
    if (r_old > r_new) std::memset(static_cast<void*>(o + 2 * (pw_ - r_old)), 0, (r_old - r_new) * sizeof(cfloat));
    detail::multiply(s, q, o, f_new);
    // columns pw - r_new .. pw - 1 take quarter columns r_new .. 1
    detail::multiply_reversed(s + 2 * (pw_ - r_new), q + 2, o + 2 * (pw_ - r_new), r_new);
    written[ky] = static_cast<std::uint32_t>(e);
  };
  for (std::size_t qy = 0; qy <= ph_ / 2; ++qy) {
    const float* q = reinterpret_cast<const float*>(quarter_.row(qy));
    const std::size_t e = support_[qy];
    row(qy, q, e);
    if (qy != 0 && ph_ - qy != qy) row(ph_ - qy, q, e);
  }
}

// ---------------------------------------------------------------------------
// Process-wide cache: a weak index of every live table plus a byte-bounded
// LRU list of strong references.

namespace {

using Key = std::tuple<int, std::size_t, std::size_t, double, double, double, double, double, bool>;

struct Cache {
  std::mutex mutex;
  std::map<Key, std::weak_ptr<const TransferFunction>> index;
  std::list<std::pair<Key, std::shared_ptr<const TransferFunction>>> lru; // front = most recent
  std::size_t retained_bytes = 0;
  std::size_t budget = std::size_t(256) << 20;
  std::size_t hits = 0, misses = 0;

  void trim() {
    while (retained_bytes > budget && !lru.empty()) {
      retained_bytes -= lru.back().second->bytes();
      lru.pop_back();
    }
  }
  /// Move (or put) `key` at the front of the LRU list.
  void touch(const Key& key, const std::shared_ptr<const TransferFunction>& tf) {
    for (auto it = lru.begin(); it != lru.end(); ++it)
      if (it->first == key) {
        lru.splice(lru.begin(), lru, it);
        return;
      }
    lru.emplace_front(key, tf);
    retained_bytes += tf->bytes();
    trim();
  }
  void prune() {
    for (auto it = index.begin(); it != index.end();)
      it = it->second.expired() ? index.erase(it) : std::next(it);
  }
};

Cache& cache() {
  static Cache* c = new Cache; // never destroyed: safe during static destruction
  return *c;
}

} // namespace

std::shared_ptr<const TransferFunction> cached_transfer(TransferKind kind, std::size_t ph, std::size_t pw,
                                                        const Grid& grid, double distance, bool band_limit) {
  const Key key{static_cast<int>(kind), ph, pw, grid.dy, grid.dx, grid.wavelength, grid.medium_index, distance,
                band_limit};
  Cache& c = cache();
  {
    std::lock_guard lock(c.mutex);
    if (auto it = c.index.find(key); it != c.index.end())
      if (auto tf = it->second.lock()) {
        ++c.hits;
        c.touch(key, tf);
        return tf;
      }
  }
  auto made = std::make_shared<const TransferFunction>(kind, ph, pw, grid, distance, band_limit);
  std::lock_guard lock(c.mutex);
  if (auto it = c.index.find(key); it != c.index.end())
    if (auto tf = it->second.lock()) { // another thread made it meanwhile
      ++c.hits;
      c.touch(key, tf);
      return tf;
    }
  ++c.misses;
  c.prune();
  c.index[key] = made;
  c.touch(key, made);
  return made;
}

TransferCacheStats transfer_cache_stats() {
  Cache& c = cache();
  std::lock_guard lock(c.mutex);
  TransferCacheStats s;
  for (const auto& [key, weak] : c.index)
    if (auto tf = weak.lock()) {
      ++s.live;
      s.live_bytes += tf->bytes();
    }
  s.retained = c.lru.size();
  s.retained_bytes = c.retained_bytes;
  s.hits = c.hits;
  s.misses = c.misses;
  return s;
}

void set_transfer_cache_budget(std::size_t bytes) {
  Cache& c = cache();
  std::lock_guard lock(c.mutex);
  c.budget = bytes;
  c.trim();
}

std::size_t transfer_cache_budget() {
  Cache& c = cache();
  std::lock_guard lock(c.mutex);
  return c.budget;
}

void clear_transfer_cache() {
  Cache& c = cache();
  std::lock_guard lock(c.mutex);
  c.lru.clear();
  c.retained_bytes = 0;
  c.hits = c.misses = 0;
  c.prune();
}

} // namespace wavestack::propagate
