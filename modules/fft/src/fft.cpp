#include "wavestack/fft/fft.hpp"

#include "wavestack/core/error.hpp"
#include "wavestack/core/log.hpp"

#include <fftw3.h>
#include <tbb/blocked_range.h>
#include <tbb/parallel_for.h>
#include <tbb/task_arena.h>

#include <cstdint>
#include <cstdio>
#include <cstring>
#include <filesystem>
#include <map>
#include <memory>
#include <mutex>
#include <tuple>
#include <limits>

namespace wavestack::fft {

static_assert(sizeof(cfloat) == sizeof(fftwf_complex), "std::complex<float> must match fftwf_complex");
static_assert(image_alignment % 64 == 0, "Image storage must satisfy FFTW's strictest SIMD alignment");

namespace {

enum class Kind { c2c, r2c, padded };

/// Kind, h, w, direction, in place, planning, data rows (padded only).
using Key = std::tuple<Kind, std::size_t, std::size_t, Direction, bool, Planning, std::size_t>;

unsigned fftw_flags(Planning p) {
  switch (p) {
  case Planning::measure: return FFTW_MEASURE;
  case Planning::patient: return FFTW_PATIENT;
  case Planning::estimate: break;
  }
  return FFTW_ESTIMATE;
}

const char* planning_name(Planning p) {
  switch (p) {
  case Planning::measure: return "measure";
  case Planning::patient: return "patient";
  case Planning::estimate: break;
  }
  return "estimate";
}

int as_int(std::size_t n, const char* what) {
  if (n == 0 || n > static_cast<std::size_t>(std::numeric_limits<int>::max()))
    fail_internal(std::string("FFT ") + what + " " + std::to_string(n) + " is out of range");
  return static_cast<int>(n);
}

/// Scratch memory from fftwf_malloc, so plans are made with FFTW's own
/// alignment and never on live data.
struct Scratch {
  explicit Scratch(std::size_t bytes) : p(fftwf_malloc(bytes)) {
    if (!p) throw std::bad_alloc();
  }
  ~Scratch() { fftwf_free(p); }
  Scratch(const Scratch&) = delete;
  Scratch& operator=(const Scratch&) = delete;
  void* p;
};

bool overlaps(const void* a, std::size_t abytes, const void* b, std::size_t bbytes) {
  const auto pa = reinterpret_cast<std::uintptr_t>(a);
  const auto pb = reinterpret_cast<std::uintptr_t>(b);
  return pa < pb + bbytes && pb < pa + abytes;
}

class C2CPlan final : public C2C {
public:
  C2CPlan(std::size_t h, std::size_t w, Direction d, bool ip, fftwf_plan p) : C2C(h, w, d, ip), plan_(p) {}
  void execute(const cfloat* in, cfloat* out) const override {
    if (!is_aligned(in) || !is_aligned(out))
      fail_internal("FFT arrays must be 64-byte aligned (use wavestack::Image storage)");
    if (in_place_) {
      if (in != out) fail_internal("an in-place FFT plan needs the same array for input and output");
    } else {
      const std::size_t bytes = h_ * w_ * sizeof(cfloat);
      if (overlaps(in, bytes, out, bytes))
        fail_internal("an out-of-place FFT plan needs non-overlapping input and output arrays");
    }
    // const_cast: out-of-place plans are made with FFTW_PRESERVE_INPUT, and an
    // in-place plan writes through `out`, which is the same array.
    auto* i = reinterpret_cast<fftwf_complex*>(const_cast<cfloat*>(in));
    fftwf_execute_dft(plan_, i, reinterpret_cast<fftwf_complex*>(out));
  }

private:
  fftwf_plan plan_; // never destroyed: plans live until process exit
};

class R2CPlan final : public R2C {
public:
  R2CPlan(std::size_t h, std::size_t w, fftwf_plan p) : R2C(h, w), plan_(p) {}
  void execute(const float* in, cfloat* out) const override {
    if (!is_aligned(in) || !is_aligned(out))
      fail_internal("FFT arrays must be 64-byte aligned (use wavestack::Image storage)");
    if (overlaps(in, h_ * w_ * sizeof(float), out, h_ * spectrum_width() * sizeof(cfloat)))
      fail_internal("the real-to-complex FFT needs non-overlapping input and output arrays");
    fftwf_execute_dft_r2c(plan_, const_cast<float*>(in), reinterpret_cast<fftwf_complex*>(out));
  }

private:
  fftwf_plan plan_;
};

/// Row pass: FFTW plans of `block` and of the last, shorter block of rows
/// (out of place, input preserved); column pass: the same for columns (in
/// place on the output). Block offsets are multiples of 32 complex values
/// (256 bytes), so every block has the planning arrays' alignment.
class PaddedPlan final : public PaddedC2C {
public:
  PaddedPlan(std::size_t h, std::size_t w, std::size_t rows, Direction d, fftwf_plan row_full, fftwf_plan row_last,
             fftwf_plan col_full, fftwf_plan col_last)
      : PaddedC2C(h, w, rows, d), row_full_(row_full), row_last_(row_last), col_full_(col_full),
        col_last_(col_last) {}
  void execute(const cfloat* in, cfloat* out) const override {
    if (!is_aligned(in) || !is_aligned(out))
      fail_internal("FFT arrays must be 64-byte aligned (use wavestack::Image storage)");
    if (overlaps(in, rows_ * w_ * sizeof(cfloat), out, h_ * w_ * sizeof(cfloat)))
      fail_internal("a padded FFT plan needs non-overlapping input and output arrays");
    // const_cast: the row plans are made with FFTW_PRESERVE_INPUT.
    auto* i = reinterpret_cast<fftwf_complex*>(const_cast<cfloat*>(in));
    auto* o = reinterpret_cast<fftwf_complex*>(out);
    const std::size_t row_blocks = (rows_ + block - 1) / block, col_blocks = (w_ + block - 1) / block;
    tbb::this_task_arena::isolate([&] {
      tbb::parallel_for(tbb::blocked_range<std::size_t>(0, row_blocks + 1, 1),
                        [&](const tbb::blocked_range<std::size_t>& r) {
                          for (std::size_t b = r.begin(); b != r.end(); ++b) {
                            if (b == row_blocks) { // the padding rows of the output
                              if (rows_ < h_) std::memset(static_cast<void*>(o + rows_ * w_), 0,
                                                          (h_ - rows_) * w_ * sizeof(fftwf_complex));
                              continue;
                            }
                            const std::size_t at = b * block * w_;
                            fftwf_execute_dft(b + 1 == row_blocks ? row_last_ : row_full_, i + at, o + at);
                          }
                        });
      tbb::parallel_for(tbb::blocked_range<std::size_t>(0, col_blocks, 1),
                        [&](const tbb::blocked_range<std::size_t>& r) {
                          for (std::size_t b = r.begin(); b != r.end(); ++b) {
                            const std::size_t at = b * block;
                            fftwf_execute_dft(b + 1 == col_blocks ? col_last_ : col_full_, o + at, o + at);
                          }
                        });
    });
  }

private:
  fftwf_plan row_full_, row_last_, col_full_, col_last_; // never destroyed
};

/// The process-wide plan cache. Deliberately never destroyed, so plans stay
/// valid for any code that runs during static destruction.
struct Cache {
  std::mutex mutex; // serialises every call into the FFTW planner and wisdom
  Planning planning = Planning::estimate;
  std::map<Key, std::shared_ptr<const C2C>> c2c;
  std::map<Key, std::shared_ptr<const R2C>> r2c;
  std::map<Key, std::shared_ptr<const PaddedC2C>> padded;

  Cache() {
    // Belt and braces: we already serialise planning, but this makes FFTW's
    // own planner lock any other caller too (needs libfftw3f_threads).
    fftwf_make_planner_thread_safe();
  }
};

Cache& cache() {
  static Cache* c = new Cache;
  return *c;
}

} // namespace

std::shared_ptr<const C2C> plan_c2c(std::size_t h, std::size_t w, Direction dir, bool in_place) {
  const int ih = as_int(h, "height"), iw = as_int(w, "width");
  Cache& c = cache();
  std::lock_guard lock(c.mutex);
  const Key key{Kind::c2c, h, w, dir, in_place, c.planning, 0};
  if (auto it = c.c2c.find(key); it != c.c2c.end()) return it->second;

  const std::size_t bytes = h * w * sizeof(fftwf_complex);
  Scratch a(bytes);
  std::unique_ptr<Scratch> b;
  if (!in_place) b = std::make_unique<Scratch>(bytes);
  auto* in = static_cast<fftwf_complex*>(a.p);
  auto* out = in_place ? in : static_cast<fftwf_complex*>(b->p);
  // Planning with measure/patient overwrites both arrays; they are scratch.
  unsigned flags = fftw_flags(c.planning);
  if (!in_place) flags |= FFTW_PRESERVE_INPUT;
  fftwf_plan p = fftwf_plan_dft_2d(ih, iw, in, out, dir == Direction::forward ? FFTW_FORWARD : FFTW_BACKWARD, flags);
  if (!p)
    fail_internal("FFTW could not plan a " + std::to_string(h) + "x" + std::to_string(w) + " complex transform");
  log::debug("fft: planned " + std::to_string(h) + "x" + std::to_string(w) + " complex " +
             (dir == Direction::forward ? "forward" : "backward") + (in_place ? " in-place" : "") + " (" +
             planning_name(c.planning) + ")");
  auto plan = std::make_shared<const C2CPlan>(h, w, dir, in_place, p);
  c.c2c.emplace(key, plan);
  return plan;
}

std::shared_ptr<const R2C> plan_r2c(std::size_t h, std::size_t w) {
  const int ih = as_int(h, "height"), iw = as_int(w, "width");
  Cache& c = cache();
  std::lock_guard lock(c.mutex);
  const Key key{Kind::r2c, h, w, Direction::forward, false, c.planning, 0};
  if (auto it = c.r2c.find(key); it != c.r2c.end()) return it->second;

  Scratch a(h * w * sizeof(float));
  Scratch b(h * (w / 2 + 1) * sizeof(fftwf_complex));
  fftwf_plan p = fftwf_plan_dft_r2c_2d(ih, iw, static_cast<float*>(a.p), static_cast<fftwf_complex*>(b.p),
                                       fftw_flags(c.planning) | FFTW_PRESERVE_INPUT);
  if (!p)
    fail_internal("FFTW could not plan a " + std::to_string(h) + "x" + std::to_string(w) +
                  " real-to-complex transform that preserves its input");
  log::debug("fft: planned " + std::to_string(h) + "x" + std::to_string(w) + " real-to-complex (" +
             planning_name(c.planning) + ")");
  auto plan = std::make_shared<const R2CPlan>(h, w, p);
  c.r2c.emplace(key, plan);
  return plan;
}

std::shared_ptr<const PaddedC2C> plan_padded_c2c(std::size_t h, std::size_t w, std::size_t rows, Direction dir) {
  const int ih = as_int(h, "height"), iw = as_int(w, "width");
  if (rows == 0 || rows > h)
    fail_internal("padded FFT of height " + std::to_string(h) + " with " + std::to_string(rows) + " data rows");
  Cache& c = cache();
  std::lock_guard lock(c.mutex);
  const Key key{Kind::padded, h, w, dir, false, c.planning, rows};
  if (auto it = c.padded.find(key); it != c.padded.end()) return it->second;

  Scratch a(h * w * sizeof(fftwf_complex)), b(h * w * sizeof(fftwf_complex));
  auto* in = static_cast<fftwf_complex*>(a.p);
  auto* out = static_cast<fftwf_complex*>(b.p);
  const int sign = dir == Direction::forward ? FFTW_FORWARD : FFTW_BACKWARD;
  const unsigned flags = fftw_flags(c.planning);
  constexpr std::size_t bk = PaddedC2C::block;
  auto lines = [&](std::size_t count, bool along_rows) {
    const int howmany = static_cast<int>(count);
    if (along_rows) // `count` rows of w values, rows w apart
      return fftwf_plan_many_dft(1, &iw, howmany, in, nullptr, 1, iw, out, nullptr, 1, iw, sign,
                                 flags | FFTW_PRESERVE_INPUT);
    // `count` columns of h values, w apart, neighbouring columns 1 apart
    return fftwf_plan_many_dft(1, &ih, howmany, out, nullptr, iw, 1, out, nullptr, iw, 1, sign, flags);
  };
  const std::size_t row_last = rows - (rows - 1) / bk * bk, col_last = w - (w - 1) / bk * bk;
  fftwf_plan rf = lines(std::min(bk, rows), true), rl = lines(row_last, true);
  fftwf_plan cf = lines(std::min(bk, w), false), cl = lines(col_last, false);
  if (!rf || !rl || !cf || !cl)
    fail_internal("FFTW could not plan the row and column passes of a " + std::to_string(h) + "x" +
                  std::to_string(w) + " complex transform");
  log::debug("fft: planned " + std::to_string(h) + "x" + std::to_string(w) + " complex " +
             (dir == Direction::forward ? "forward" : "backward") + " of " + std::to_string(rows) +
             " data rows, in blocks (" + planning_name(c.planning) + ")");
  auto plan = std::make_shared<const PaddedPlan>(h, w, rows, dir, rf, rl, cf, cl);
  c.padded.emplace(key, plan);
  return plan;
}

void set_planning(Planning p) {
  Cache& c = cache();
  std::lock_guard lock(c.mutex);
  c.planning = p;
}

Planning planning() {
  Cache& c = cache();
  std::lock_guard lock(c.mutex);
  return c.planning;
}

bool load_wisdom(const std::string& path) {
  std::error_code ec;
  if (!std::filesystem::exists(path, ec)) return false;
  Cache& c = cache();
  std::lock_guard lock(c.mutex);
  if (!fftwf_import_wisdom_from_filename(path.c_str())) {
    ErrorContext ctx;
    ctx.file = path;
    fail_config("not a readable FFTW single-precision wisdom file of this FFTW build (" +
                    std::string(fftwf_version) + "); delete it and it is made again",
                ctx);
  }
  return true;
}

void save_wisdom(const std::string& path) {
  const std::string tmp = path + ".tmp";
  Cache& c = cache();
  std::lock_guard lock(c.mutex);
  ErrorContext ctx;
  ctx.file = path;
  if (!fftwf_export_wisdom_to_filename(tmp.c_str())) {
    std::remove(tmp.c_str());
    fail_output("could not write the FFTW wisdom file", ctx);
  }
  std::error_code ec;
  std::filesystem::rename(tmp, path, ec);
  if (ec) {
    std::remove(tmp.c_str());
    fail_output("could not write the FFTW wisdom file: " + ec.message(), ctx);
  }
}

bool is_aligned(const void* p) noexcept {
  // fftwf_alignment_of() takes a non-const pointer but only inspects its value.
  return fftwf_alignment_of(static_cast<float*>(const_cast<void*>(p))) == 0;
}

std::size_t cached_plans() {
  Cache& c = cache();
  std::lock_guard lock(c.mutex);
  return c.c2c.size() + c.r2c.size() + c.padded.size();
}

namespace {
bool smooth7(std::size_t n) {
  for (std::size_t p : {2u, 3u, 5u, 7u})
    while (n % p == 0) n /= p;
  return n == 1;
}
} // namespace

std::size_t good_size(std::size_t n) {
  if (n <= 1) return 1;
  // 7-smooth numbers are dense enough (gaps are a few percent of n) that a
  // linear search is cheap.
  while (!smooth7(n)) ++n;
  return n;
}

std::size_t good_even_size(std::size_t n) {
  if (n <= 2) return 2;
  if (n % 2) ++n;
  while (!smooth7(n)) n += 2;
  return n;
}

namespace {

template <class T> void check_shift_args(ImageView<const T> in, ImageView<T> out, const char* name) {
  if (in.height() != out.height() || in.width() != out.width())
    fail_internal(std::string(name) + ": input and output shapes differ");
  if (in.empty()) return;
  const std::size_t ib = ((in.height() - 1) * in.stride() + in.width()) * sizeof(T);
  const std::size_t ob = ((out.height() - 1) * out.stride() + out.width()) * sizeof(T);
  if (overlaps(in.data(), ib, out.data(), ob)) fail_internal(std::string(name) + " is out-of-place: arrays overlap");
}

/// out(y, x) = in((y + sy) mod h, (x + sx) mod w), one or two memcpy per row.
template <class T> void roll(ImageView<const T> in, ImageView<T> out, std::size_t sy, std::size_t sx) {
  const std::size_t h = in.height(), w = in.width();
  const std::size_t tail = w - sx; // out[0, tail) = in[sx, w), out[tail, w) = in[0, sx)
  for (std::size_t y = 0; y < h; ++y) {
    const T* src = in.row((y + sy) % h);
    T* dst = out.row(y);
    std::memcpy(static_cast<void*>(dst), src + sx, tail * sizeof(T));
    std::memcpy(static_cast<void*>(dst + tail), src, sx * sizeof(T));
  }
}

template <class T> void do_fftshift(ImageView<const T> in, ImageView<T> out) {
  check_shift_args(in, out, "fftshift");
  if (in.empty()) return;
  const std::size_t h = in.height(), w = in.width();
  // in((y - h/2) mod h) == in((y + h - h/2) mod h)
  roll(in, out, h - h / 2, w - w / 2);
}

template <class T> void do_ifftshift(ImageView<const T> in, ImageView<T> out) {
  check_shift_args(in, out, "ifftshift");
  if (in.empty()) return;
  roll(in, out, in.height() / 2, in.width() / 2);
}

} // namespace

void fftshift(ImageView<const cfloat> in, ImageView<cfloat> out) { do_fftshift(in, out); }
void fftshift(ImageView<const float> in, ImageView<float> out) { do_fftshift(in, out); }
void ifftshift(ImageView<const cfloat> in, ImageView<cfloat> out) { do_ifftshift(in, out); }
void ifftshift(ImageView<const float> in, ImageView<float> out) { do_ifftshift(in, out); }

} // namespace wavestack::fft
