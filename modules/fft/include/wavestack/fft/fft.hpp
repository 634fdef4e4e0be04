#pragma once
// Thread-safe FFTW (single precision) plan cache.
//
// Conventions (FFTW manual, "What FFTW Really Computes"):
//  * forward transform uses exp(-2πi jk/n), backward exp(+2πi jk/n);
//  * transforms are UNNORMALISED: forward then backward multiplies by h*w;
//  * bin k holds frequency k/(n·d) for k < n/2 ... negative frequencies in the
//    upper half (same layout as numpy.fft.fftfreq);
//  * r2c output has h rows of w/2+1 complex values (the non-negative
//    column frequencies); the rest follows from Hermitian symmetry.
//
// Only this module calls the FFTW planner, under one mutex. Plans are always
// made on scratch buffers from fftwf_malloc (never on live data) and executed
// with the new-array interface, which is safe to call concurrently from many
// threads on different arrays. The new-array interface requires the arrays to
// have the same SIMD alignment as the planning buffers: fftwf_malloc memory
// has fftwf_alignment_of() == 0, and so has every 64-byte aligned pointer
// (wavestack::Image guarantees it; FFTW's strictest SIMD alignment is 64
// bytes for AVX-512, 32 for AVX). execute() checks this and throws
// Error(internal) on a misaligned pointer, on an in-place plan given two
// arrays, or an out-of-place plan given overlapping ones.
//
// Out-of-place plans never modify their input (FFTW_PRESERVE_INPUT).
// Plans are never destroyed: a plan returned once stays valid until exit.
#include "wavestack/core/image.hpp"

#include <cstddef>
#include <memory>
#include <string>

namespace wavestack::fft {

enum class Direction { forward, backward };

/// How hard the planner works. `estimate` is fast and the plan is a pure
/// function of the sizes, so results are bit-reproducible across runs;
/// `measure` times candidate algorithms (faster execution, but the chosen
/// algorithm may differ between runs unless a wisdom file is used).
enum class Planning { estimate, measure, patient };

/// A 2-D complex-to-complex plan, out-of-place or in-place.
class C2C {
public:
  virtual ~C2C() = default;
  std::size_t height() const noexcept { return h_; }
  std::size_t width() const noexcept { return w_; }
  Direction direction() const noexcept { return dir_; }
  bool in_place() const noexcept { return in_place_; }
  /// Execute on `in` → `out` (both h*w contiguous, 64-byte aligned). For an
  /// in-place plan pass the same pointer twice. Thread-safe (different arrays
  /// per thread). The wrapper allocates nothing, but FFTW itself mallocs
  /// small scratch blocks inside some algorithms (measured with FFTW 3.3.10:
  /// none for estimate plans of 64..2048 squared out-of-place, one for
  /// in-place, and h+1 row buffers for a measured in-place h×w plan of
  /// h >= 1024), so this is not strictly allocation-free.
  virtual void execute(const cfloat* in, cfloat* out) const = 0;

protected:
  C2C(std::size_t h, std::size_t w, Direction d, bool ip) : h_(h), w_(w), dir_(d), in_place_(ip) {}
  std::size_t h_, w_;
  Direction dir_;
  bool in_place_;
};

/// A 2-D real-to-complex forward plan (out-of-place): h*w floats → h*(w/2+1) complex.
class R2C {
public:
  virtual ~R2C() = default;
  std::size_t height() const noexcept { return h_; }
  std::size_t width() const noexcept { return w_; }
  std::size_t spectrum_width() const noexcept { return w_ / 2 + 1; }
  /// `in` is left unchanged: the plan is made with FFTW_PRESERVE_INPUT, which
  /// FFTW honours for (multi-dimensional) r2c; only multi-dimensional c2r has
  /// no input-preserving algorithm. `in` is h*w floats, `out` h*(w/2+1)
  /// complex values, both 64-byte aligned. Thread-safe; see C2C::execute on
  /// FFTW's internal scratch allocations.
  virtual void execute(const float* in, cfloat* out) const = 0;

protected:
  R2C(std::size_t h, std::size_t w) : h_(h), w_(w) {}
  std::size_t h_, w_;
};

/// The 2-D complex transform of a zero-padded field, out of place: the
/// input's first `rows()` rows hold the data, the rows below are zero and
/// are never read; the output is the full h×w transform. It is computed as
/// two passes of 1-D transforms — along each data row, then along every
/// column — in fixed blocks of `block` lines (the last block of each pass
/// may be shorter) that run on the threads of the calling TBB task arena.
/// A block is transformed the same way whichever thread runs it, so the
/// values do not depend on the number of threads. Measured against FFTW's
/// own 2-D plan on one thread: as fast at 512² and 640², 8% faster at 1024²
/// (FFTW 3.3.10, measure plans); the row pass also skips the padding rows.
class PaddedC2C {
public:
  static constexpr std::size_t block = 32;
  virtual ~PaddedC2C() = default;
  std::size_t height() const noexcept { return h_; }
  std::size_t width() const noexcept { return w_; }
  std::size_t rows() const noexcept { return rows_; }
  Direction direction() const noexcept { return dir_; }
  /// `in` (rows()×w used, row stride w) → `out` (h×w), both 64-byte
  /// aligned, not overlapping; `in` is left unchanged. Runs its blocks in
  /// tbb::this_task_arena::isolate, so a thread waiting for them never
  /// picks up an outer task. Thread-safe (different arrays per call).
  virtual void execute(const cfloat* in, cfloat* out) const = 0;

protected:
  PaddedC2C(std::size_t h, std::size_t w, std::size_t rows, Direction d) : h_(h), w_(w), rows_(rows), dir_(d) {}
  std::size_t h_, w_, rows_;
  Direction dir_;
};

/// Get (or make, once) a plan. Thread-safe; planning is serialised. The
/// returned plan stays valid for the life of the process.
std::shared_ptr<const C2C> plan_c2c(std::size_t h, std::size_t w, Direction dir, bool in_place = false);
std::shared_ptr<const R2C> plan_r2c(std::size_t h, std::size_t w);
/// `rows`: 1..h data rows at the top of the input.
std::shared_ptr<const PaddedC2C> plan_padded_c2c(std::size_t h, std::size_t w, std::size_t rows, Direction dir);

/// Planner effort for plans made from now on (default: estimate). The effort
/// is part of the cache key, so plans made earlier stay as they were. Note
/// that FFTW uses loaded wisdom for estimate plans too, so after load_wisdom
/// even estimate plans may pick measured algorithms.
void set_planning(Planning p);
Planning planning();

/// Load / save FFTW wisdom (the planner's saved choices; recreate it when the
/// FFTW build or the machine changes). load returns false when the file does
/// not exist; throws Error(config) naming the file when it is not wisdom of
/// this FFTW build. save writes `path` atomically (temporary file + rename)
/// and throws Error(output) naming the file when that fails.
bool load_wisdom(const std::string& path);
void save_wisdom(const std::string& path);

/// True when `p` has the alignment plans are made with (any 64-byte aligned
/// pointer, e.g. Image::data(), qualifies).
bool is_aligned(const void* p) noexcept;

/// Number of plans currently cached (for tests).
std::size_t cached_plans();

/// Smallest n' >= n whose prime factors are all in {2, 3, 5, 7}: sizes
/// FFTW transforms fastest.
std::size_t good_size(std::size_t n);
/// Smallest even good size >= n (crops that must have a centre pixel).
std::size_t good_even_size(std::size_t n);

/// Signed frequency index of FFT bin k for length n: k for k < (n+1)/2, else k - n.
inline long signed_bin(std::size_t k, std::size_t n) noexcept {
  return k < (n + 1) / 2 ? static_cast<long>(k) : static_cast<long>(k) - static_cast<long>(n);
}
/// FFT bin of signed frequency index f for length n (inverse of signed_bin).
inline std::size_t bin_of(long f, std::size_t n) noexcept {
  const long m = static_cast<long>(n);
  return static_cast<std::size_t>(((f % m) + m) % m);
}

/// Physical frequency of bin k for length n and sample pitch d:
/// signed_bin(k, n) / (n·d) (numpy.fft.fftfreq(n, d)[k]).
inline double bin_frequency(std::size_t k, std::size_t n, double d) noexcept {
  return static_cast<double>(signed_bin(k, n)) / (static_cast<double>(n) * d);
}

/// Move the zero frequency to the centre (numpy.fft.fftshift, both axes):
/// out(y, x) = in((y - h/2) mod h, (x - w/2) mod w) with integer division, so
/// bin 0 lands at (h/2, w/2) for odd and even sizes. Out-of-place: `in` and
/// `out` must have the same shape and must not overlap (Error(internal)
/// otherwise). Views may be strided.
void fftshift(ImageView<const cfloat> in, ImageView<cfloat> out);
void fftshift(ImageView<const float> in, ImageView<float> out);
/// Inverse of fftshift (numpy.fft.ifftshift): out(y, x) = in((y + h/2) mod h,
/// (x + w/2) mod w). Differs from fftshift for odd sizes.
void ifftshift(ImageView<const cfloat> in, ImageView<cfloat> out);
void ifftshift(ImageView<const float> in, ImageView<float> out);

} // namespace wavestack::fft
